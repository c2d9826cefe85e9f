"""The element symbols used to check a catalyst's metal, against the periodictable package's element table."""

from __future__ import annotations

import periodictable

from catalog.core.elements import SYMBOLS, is_element


def test_symbols_are_periodictables_elements_in_order_of_atomic_number():
    # Source: periodictable (PyPI), its table of elements Z = 1..118 (Z = 0, the neutron, is no element).
    reference = tuple(el.symbol for el in periodictable.elements if el.number > 0)
    assert SYMBOLS == reference
    assert len(SYMBOLS) == 118 and SYMBOLS[0] == "H" and SYMBOLS[77] == "Pt"  # Pt is Z = 78 (IUPAC)


def test_only_symbols_as_written_are_elements():
    # Isotope names (D, T), the neutron (n), a formula and a symbol in the wrong case are not element symbols.
    assert is_element("Pd") and is_element("Co") and is_element("W")
    assert not any(is_element(s) for s in ("D", "T", "n", "CO", "co", "Xx", "", "Pt ", "elements"))
