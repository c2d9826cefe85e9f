"""Numbers and units as a chemist writes them: digits that match the uncertainty, typeset units, no float noise.

Pure functions, shared by the CLI, the report, the exports and the app, so a figure reads the same everywhere.

The rounding rule is the GUM's (JCGM 100:2008, *Evaluation of measurement data — Guide to the expression of
uncertainty in measurement*, 7.2.6): quote an uncertainty to at most two significant digits and round the estimate
to be consistent with it, i.e. to the same decimal place. For a 95 % interval ``[low, high]`` around ``value`` the
uncertainty is the shorter half-width, so both ends keep a meaningful second digit even when the interval is
asymmetric (log-normal intervals of a TOF are). A value with no uncertainty gets three significant digits (common
practice, no source). Very large or small values share one power of ten, written ``× 10⁻⁴``.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal

import numpy as np
import pandas as pd

__all__ = [
    "MISSING", "PLAIN_DIGITS", "UNCERTAINTY_DIGITS", "decimals_for", "format_interval", "format_number",
    "format_pm", "interval_decimals", "round_for_file", "round_to", "unit_label",
]

#: Significant digits of an uncertainty (GUM 7.2.6: "at most two significant digits").
UNCERTAINTY_DIGITS = 2
#: Significant digits of a value quoted without an uncertainty (common practice, no source).
PLAIN_DIGITS = 3
#: What a figure that could not be computed shows as.
MISSING = "—"
# Outside [1e-3, 1e5) a value is written with a power of ten: 0.000123 and 123456 are hard to read at a glance.
_SCI_LOW, _SCI_HIGH = 1e-3, 1e5
# numpy rounds exactly only while 10**decimals is exact in binary64 (up to 1e22).
_MAX_DECIMALS = 22

_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


def _finite(x) -> bool:
    return x is not None and not pd.isna(x) and math.isfinite(float(x))


def decimals_for(uncertainty: float, digits: int = UNCERTAINTY_DIGITS) -> int | None:
    """Decimal place that keeps ``digits`` significant digits of ``uncertainty``.

    .. math:: d = \\mathrm{digits} - 1 - \\lfloor \\log_{10} u \\rfloor

    so 0.00093 → 5 (0.00093), 3.97 → 1 (4.0), 450 → −1 (450, rounded to tens). None for a missing, zero or
    negative uncertainty.
    """
    if not _finite(uncertainty) or float(uncertainty) <= 0:
        return None
    return int(digits - 1 - math.floor(math.log10(float(uncertainty))))


def interval_decimals(value: float, low: float, high: float, digits: int = UNCERTAINTY_DIGITS) -> int | None:
    """Decimal place for a value and its interval: :func:`decimals_for` of the shorter half-width."""
    if not (_finite(value) and _finite(low) and _finite(high)):
        return None
    halves = [h for h in (float(value) - float(low), float(high) - float(value)) if h > 0]
    return decimals_for(min(halves), digits) if halves else None


def round_to(x: float, decimals: int) -> float:
    """``x`` rounded half-to-even at ``decimals`` places (negative: tens, hundreds...), never ``-0.0``."""
    out = float(np.round(float(x), min(decimals, _MAX_DECIMALS)))
    return 0.0 if out == 0 else out


def _plain_decimals(x: float, digits: int) -> int:
    return digits - 1 - math.floor(math.log10(abs(x))) if x != 0 else 0


def _exponent(x: float) -> int:
    """Power of ten to factor out of ``x`` (0 when it reads well as it is)."""
    if x == 0 or _SCI_LOW <= abs(x) < _SCI_HIGH:
        return 0
    return math.floor(math.log10(abs(x)))


def _digits(x: float, decimals: int, exponent: int) -> str:
    """``x`` written with ``decimals`` decimal places after dividing by 10**exponent (minus sign typeset)."""
    shown = max(decimals + exponent, 0)
    # Decimal scaling: 10.0 ** exponent underflows to 0 for subnormal values (x ~ 1e-324).
    text = f"{Decimal(repr(round_to(x, decimals))).scaleb(-exponent):.{shown}f}"
    return text.replace("-", "−")


def _with_unit(text: str, exponent: int, unit: str | None, currency: str | None, grouped: bool) -> str:
    if exponent:
        power = f"10{str(exponent).translate(_SUPERSCRIPT)}"
        text = f"({text}) × {power}" if grouped else f"{text} × {power}"
    label = unit_label(unit, currency) if unit else ""
    return f"{text} {label}" if label else text


def format_number(x, unit: str | None = None, digits: int = PLAIN_DIGITS, currency: str | None = None) -> str:
    """A value without an uncertainty, to ``digits`` significant digits: ``format_number(36.850000000000023)`` is
    '36.9', ``format_number(1.234e-5, '1/s')`` is '1.23 × 10⁻⁵ s⁻¹'. Missing values show as :data:`MISSING`."""
    if not _finite(x):
        return MISSING
    x = float(x)
    exponent = _exponent(x)
    return _with_unit(_digits(x, _plain_decimals(x, digits), exponent), exponent, unit, currency, grouped=False)


def format_interval(value, low, high, unit: str | None = None, digits: int = UNCERTAINTY_DIGITS,
                    currency: str | None = None) -> str:
    """A value and its interval rounded together, e.g. '51.0 [47.0, 55.0] kJ/mol'.

    The decimal place is :func:`interval_decimals`; one power of ten is shared by all three numbers
    ('1.20 [1.00, 1.40] × 10⁻⁴ s⁻¹'). Without a usable interval the value alone is shown (:func:`format_number`).
    """
    decimals = interval_decimals(value, low, high, digits)
    if decimals is None:
        return format_number(value, unit, currency=currency)
    # The power of ten follows the largest of the three, so a value near zero with a wide interval reads well.
    exponent = _exponent(max(abs(float(value)), abs(float(low)), abs(float(high))))
    body = (f"{_digits(float(value), decimals, exponent)} [{_digits(float(low), decimals, exponent)}, "
            f"{_digits(float(high), decimals, exponent)}]")
    return _with_unit(body, exponent, unit, currency, grouped=False)


def format_pm(value, uncertainty, unit: str | None = None, digits: int = UNCERTAINTY_DIGITS,
              currency: str | None = None) -> str:
    """A value ± its uncertainty at the uncertainty's precision, e.g. '0.99000 ± 0.00093 s⁻¹',
    '(1.20 ± 0.15) × 10⁻⁴ s⁻¹'. Without a usable uncertainty the value alone is shown."""
    decimals = decimals_for(uncertainty, digits)
    if decimals is None or not _finite(value):
        return format_number(value, unit, currency=currency)
    exponent = _exponent(max(abs(float(value)), abs(float(uncertainty))))
    body = f"{_digits(float(value), decimals, exponent)} ± {_digits(float(uncertainty), decimals, exponent)}"
    return _with_unit(body, exponent, unit, currency, grouped=True)


# ---------------------------------------------------------------------------------------------------- units

# Spellings as pint and the file headers use them → as printed. Everything else goes through _typeset.
_UNIT_WORDS = {"degC": "°C", "K": "K", "-": "", "dimensionless": "", "1": "", "percent": "%", "%": "%"}
_PREFIX_U = re.compile(r"(?<![A-Za-z])u(?=(mol|m|g|L|l|s|A)\b)")
_POWER = re.compile(r"^(?P<base>[A-Za-zµ°]+)(?:\^|\*\*)?(?P<power>-?\d+)$")


def _term(token: str, negate: bool) -> str:
    token = _PREFIX_U.sub("µ", token).replace("²", "2").replace("³", "3")
    match = _POWER.match(token)
    base, power = (match.group("base"), int(match.group("power"))) if match else (token, 1)
    power = -power if negate else power
    return base if power == 1 else base + str(power).translate(_SUPERSCRIPT)


def _tokens(text: str) -> list[str]:
    return [t for t in re.split(r"[\s*·]+", text.strip().strip("()")) if t]


def unit_label(unit: str | None, currency: str | None = None) -> str:
    """A unit as people write it: '1/s' → 's⁻¹', 'degC' → '°C', 'umol/min' → 'µmol/min', 'J/(mol K)' →
    'J mol⁻¹ K⁻¹', 'm2' → 'm²'.

    One quotient with one term on each side keeps its slash (kJ/mol); a bare inverse or a compound denominator
    uses negative powers. ``money`` (the ranking's neutral price unit) becomes ``currency``, e.g. 'EUR/g'.
    Empty for dimensionless figures.
    """
    if unit is None:
        return ""
    text = unit.strip()
    if currency:
        text = re.sub(r"\bmoney\b", currency, text)
    if text in _UNIT_WORDS:
        return _UNIT_WORDS[text]
    top, _, bottom = text.partition("/")
    numerator = [t for t in _tokens(top) if t != "1"]
    denominator = _tokens(bottom)
    if len(numerator) == 1 and len(denominator) == 1 and not _POWER.match(denominator[0]):
        return f"{_term(numerator[0], False)}/{_term(denominator[0], False)}"
    terms = [_term(t, False) for t in numerator] + [_term(t, True) for t in denominator]
    return " ".join(_UNIT_WORDS.get(t, t) for t in terms)


# ---------------------------------------------------------------------------------------------------- files

def round_for_file(frame: pd.DataFrame, intervals: dict[str, tuple[str, str]] | None = None,
                   decimals: dict[str, int] | None = None, digits: int = 4) -> pd.DataFrame:
    """A copy of ``frame`` whose float columns carry only the digits they can defend, so a CSV cell reads '36.85',
    not '36.850000000000023'.

    - ``intervals`` maps a value column to its (low, high) columns; each row's three numbers are rounded to that
      row's :func:`interval_decimals` (GUM 7.2.6), or to ``digits`` significant digits where the row has no
      interval;
    - ``decimals`` fixes the decimal place of a column (e.g. 2 for a temperature in °C, 3 for a probability);
    - every other float column keeps ``digits`` significant digits per value (common practice, no source).

    Integer, boolean and text columns are returned unchanged; missing values stay missing.
    """
    out = frame.copy()
    intervals = intervals or {}
    fixed = decimals or {}
    done: set[str] = set()

    def is_float(name):
        return name in out.columns and pd.api.types.is_float_dtype(out[name])

    def apply(names, places):
        for name in names:
            values = out[name].to_numpy(float).copy()
            for place in np.unique(places[np.isfinite(places)]):
                at = places == place
                values[at] = np.round(values[at], int(min(place, _MAX_DECIMALS)))
            out[name] = values + 0.0  # + 0.0 turns -0.0 into 0.0

    def significant(name):
        values = out[name].to_numpy(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            places = digits - 1 - np.floor(np.log10(np.abs(values)))
        places[~np.isfinite(places)] = np.nan
        return places

    for value, (low, high) in intervals.items():
        if not all(is_float(n) for n in (value, low, high)):
            continue
        found = (interval_decimals(v, lo, hi) for v, lo, hi in zip(out[value], out[low], out[high], strict=True))
        row_places = np.array([np.nan if d is None else d for d in found], dtype=float)
        fallback = significant(value)
        row_places = np.where(np.isfinite(row_places), row_places, fallback)
        apply([value], row_places)
        for end in (low, high):  # an end without its value still loses its noise
            apply([end], np.where(np.isfinite(row_places), row_places, significant(end)))
        done |= {value, low, high}
    for name, place in fixed.items():
        if is_float(name):
            apply([name], np.full(len(out), float(place)))
            done.add(name)
    for name in out.columns:
        if name not in done and is_float(name):
            apply([name], significant(name))
    return out
