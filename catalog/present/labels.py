"""Plain words for what the package computes: one name per figure, flag titles, measurement kinds, settings.

The CLI, the report, the exports and the app take their wording from here, so a figure has one name everywhere
("rate enhancement over the uncatalysed blank", short form "rate enhancement") and a flag is read by its title
with the code as a secondary detail.
"""

from __future__ import annotations

from dataclasses import asdict

from catalog.analysis import diagnostics
from catalog.present.numbers import format_number, unit_label
from catalog.units import from_si

__all__ = [
    "ENHANCEMENT", "ENHANCEMENT_SHORT", "FIGURES", "NO_CURRENCY", "figure_name", "flag_title", "flags_text",
    "measurement_words", "settings_rows",
]

#: The one name of a catalyst's rate over the blank rate at the same temperature.
ENHANCEMENT = "rate enhancement over the uncatalysed blank"
#: Its short form, where space is tight (axis titles, table headers).
ENHANCEMENT_SHORT = "rate enhancement"

#: Shown for prices when no currency is set.
NO_CURRENCY = "currency"  # one word: a two-word placeholder would be typeset as two units

#: Ranking figure key → (name, short name, display unit as understood by ``catalog.units``; None: no unit).
FIGURES: dict[str, tuple[str, str, str | None]] = {
    "tof": ("TOF at the reference temperature", "TOF", "1/s"),
    "enhancement": (f"{ENHANCEMENT} at the reference temperature", ENHANCEMENT_SHORT, None),
    "ea": ("apparent activation energy", "apparent Ea", "kJ/mol"),
    "ton": ("largest TON reached", "TON", None),
    "rate_per_mass": ("rate per catalyst mass at the reference temperature", "rate per mass", "mmol/(g h)"),
    "rate_per_area": ("rate per catalyst surface area at the reference temperature", "rate per area",
                      "mmol/(m2 h)"),
    "cost": ("price per gram of catalyst", "price", "money/g"),
    "rate_per_cost": ("rate per unit of money spent on catalyst", "rate per price", "mol/(s money)"),
    "score": ("weighted score", "score", None),
}

# Settings field → (plain words, display unit or None, "%" to show a fraction as a percentage).
_SETTINGS = {
    "reference_temperature": ("reference temperature for comparing catalysts", "degC"),
    "low_ea": ("apparent Ea below which transport control is suspected", "kJ/mol"),
    "weisz_prater_limit": ("Weisz-Prater number above which pore diffusion is suspected", None),
    "mears_limit": ("Mears number above which film mass transfer is suspected", None),
    "loading_slope_tolerance": ("allowed departure of the loading-series slope from 1", None),
    "replicate_cv_limit": ("largest scatter of replicate rates (coefficient of variation)", "%"),
    "min_enhancement": (f"smallest {ENHANCEMENT} accepted without a flag", "×"),
    "min_r2": ("smallest R² of a trace fit accepted without a flag", None),
    "runs_z_limit": ("runs-test |z| above which fit residuals are not random", None),
    "late_residual_z_limit": ("late-residual z below which a trace falls short of its fit", None),
    "plateau_shortfall": ("conversion below which a levelled-off trace counts as short", "%"),
    "curvature_p_limit": ("p-value below which an Arrhenius plot counts as curved", None),
    "min_temperatures": ("temperatures recommended for an Arrhenius fit", None),
}


def figure_name(key: str, short: bool = False, currency: str | None = None) -> str:
    """Name of a ranking figure with its unit, e.g. 'TOF [s⁻¹]' (short) or 'apparent activation energy [kJ/mol]'."""
    name, short_name, unit = FIGURES.get(key, (key.replace("_", " "), key.replace("_", " "), None))
    label = unit_label(unit, currency or NO_CURRENCY) if unit else ""
    text = short_name if short else name
    return f"{text} [{label}]" if label else text


def measurement_words(kind: str) -> str:
    """A measurement kind in plain words, the registry label without its detail: 'gas_volume' → 'gas volume',
    'pressure' → 'headspace pressure' (the kind itself, spaced, when the registry does not know it)."""
    from catalog.core.measurements import MEASUREMENTS  # deferred: its converters load periodictable

    known = MEASUREMENTS.get(kind)
    return known.label.split(" (")[0] if known else str(kind).replace("_", " ")


def flag_title(code: str) -> str:
    """The plain title of a flag code (the code itself when the diagnostics do not know it)."""
    return diagnostics.FLAG_CODES.get(code, (code,))[0]


def flags_text(cell, with_codes: bool = True) -> str:
    """A semicolon-separated list of flag codes as titles: 'Apparent activation energy is low (transport-ea); ...'.

    ``with_codes`` False leaves the codes out (for tight screens, where a legend lists them).
    """
    codes = [c.strip() for c in str(cell or "").split(";") if c.strip()]
    return "; ".join(f"{flag_title(c)} ({c})" if with_codes else flag_title(c) for c in codes)


def _setting_value(value, unit: str | None) -> str:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return str(value)
    if unit == "%":
        return f"{format_number(100 * value)} %"
    if unit == "×":
        return f"{format_number(value)}×"
    if unit is None:
        return str(value) if isinstance(value, int) else format_number(value)
    return format_number(float(from_si(float(value), unit)), unit)


def settings_rows(settings) -> list[tuple[str, str]]:
    """Each analysis setting as (plain words, value in display units), e.g. ('apparent Ea below which transport
    control is suspected', '20.0 kJ/mol'). A setting without words here is shown by its name, unchanged."""
    rows = []
    for name, value in asdict(settings).items():
        words, unit = _SETTINGS.get(name, (name.replace("_", " "), None))
        rows.append((words, _setting_value(value, unit)))
    return rows
