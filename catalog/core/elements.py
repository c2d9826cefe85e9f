"""The chemical element symbols, Z = 1 to 118 (IUPAC), for checking a catalyst's metal without loading a table.

Deciding whether a text is an element symbol needs no atomic data, and importing ``periodictable`` builds its mass
tables (measured ~0.05-0.1 s of a ``catalog import``, which never needs a mass). ``tests/test_elements.py`` checks
this list against periodictable's elements.
"""

from __future__ import annotations

__all__ = ["SYMBOLS", "is_element"]

#: Symbols in order of atomic number, 1 (H) to 118 (Og); IUPAC names and symbols as of 2016.
SYMBOLS = tuple("""
H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As Se Br Kr Rb Sr Y Zr Nb Mo
Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re Os Ir Pt Au Hg Tl
Pb Bi Po At Rn Fr Ra Ac Th Pa U Np Pu Am Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl Mc Lv Ts Og
""".split())
_SYMBOLS = frozenset(SYMBOLS)


def is_element(symbol: str) -> bool:
    """Whether ``symbol`` is an element symbol as written (case matters: 'Co' is cobalt, 'CO' is not a symbol)."""
    return symbol in _SYMBOLS
