"""The flag table: every diagnostic code with its plain title, what it means and what to do, and its severity.

One entry per code; :mod:`catalog.analysis.diagnostics` holds the rules that raise them, the exports, the report and
the app show the title and explanation beside the code.
"""

from __future__ import annotations

from catalog.core import hazard

#: code → (title, what it means and what to do).
FLAG_CODES: dict[str, tuple[str, str]] = {
    "transport-ea": (
        "Apparent activation energy is low",
        "An apparent Ea this low is typical of a rate limited by diffusion or film transfer rather than by the "
        "surface reaction, so the TOF would measure the set-up, not the catalyst. Check with smaller particles or "
        "faster stirring; the rate should not change if kinetics are in control.",
    ),
    "weisz-prater": (
        "Pore diffusion may limit the rate (Weisz-Prater)",
        "The Weisz-Prater number compares the observed rate with the rate at which reactant can diffuse into the "
        "particle. Above the limit the particle interior is starved and the rate understates the catalyst. Crush "
        "or sieve to smaller particles and repeat.",
    ),
    "mears": (
        "Film mass transfer may limit the rate (Mears)",
        "The Mears number compares the observed rate with transfer through the liquid film around the particle. "
        "Above the limit the surface sees less reactant than the bulk. Stir faster or use less catalyst and repeat.",
    ),
    "loading-slope": (
        "Rate does not scale with the number of sites (loading series)",
        "For catalysts that differ only in metal loading at the same dispersion, the rate per gram should be "
        "proportional to the sites per gram (slope 1 on log axes) when kinetics are in control. A slope near 0.5 "
        "points to pore diffusion; other slopes to sites that are not equivalent. Every catalyst in the series "
        "carries this flag.",
    ),
    "late-shortfall": (
        "Trace falls below the fit at late times",
        "The last third of the trace lies consistently below the fitted rate law: the trial slowed down more than "
        "the model allows, as a deactivating catalyst does. Look at the plotted trace; compare with a fresh charge.",
    ),
    "plateau-short": (
        "Trace levelled off short of full conversion",
        "The trace reached its own plateau well below the amount the limiting reactant can give, while the rate "
        "had died. A deactivated catalyst does this; so do a leak, a wrong limiting amount or product lost to a "
        "side reaction. Check the charge and the vessel, then test a used catalyst with fresh reactant.",
    ),
    "deactivation": (
        "Catalyst appears to deactivate",
        "Several of this catalyst's trials slow down early or stop short of full conversion. Initial rates may "
        "still be sound, but TON and any long-run figure are not. Run a recycle test or add fresh reactant to a "
        "spent trial to confirm.",
    ),
    "poor-fit": (
        "Rate law fits the trace poorly",
        "The coefficient of determination is below the limit: the initial rate from this fit is uncertain. Look at "
        "the trace for noise, steps or a late start, and correct or repeat the trial.",
    ),
    "residual-pattern": (
        "Residuals follow a pattern",
        "The signs of the residuals change far less (or more) often than chance allows: the chosen rate law misses "
        "the shape of the trace. The initial rate may be biased; check the trace against the fitted curve.",
    ),
    "fit-fallback": (
        "No rate law fitted; initial slope used or no rate",
        "None of the integrated rate laws could be fitted, so the rate comes from a straight line through the early "
        "points, or there is no rate at all. Treat the figure as rough; more points early in the trial help.",
    ),
    "replicate-spread": (
        "Replicates disagree",
        "Repeat trials at one temperature scatter more than the limit (coefficient of variation). Differences "
        "between catalysts smaller than this spread are not meaningful. Check weighing, temperature and mixing, "
        "and add replicates.",
    ),
    "blank-dominated": (
        "Rate barely above the blank",
        "The catalysed rate is less than the stated multiple of the uncatalysed (blank) rate, so the TOF is a "
        "small difference of two similar numbers and very uncertain. Use more catalyst or a lower temperature.",
    ),
    "single-temperature": (
        "Measured at one temperature only",
        "With one temperature there is no activation energy, and TOF is known only at that temperature. Add trials "
        "at two or more further temperatures.",
    ),
    "no-ea": (
        "No activation energy could be fitted",
        "Trials span several temperatures but fewer than two usable TOF values remain (often the site count is "
        "unknown, or the rates did not exceed the blank). Give loading and dispersion or a site density.",
    ),
    "few-temperatures": (
        "Activation energy from few temperatures",
        "The Arrhenius fit rests on fewer temperatures than recommended; its interval is wide and curvature cannot "
        "be seen. Add a temperature.",
    ),
    "ref-outside-range": (
        "Reference temperature outside the measured range",
        "The TOF at the reference temperature is an extrapolation along the Arrhenius line (or not available "
        "without an Ea). Its interval grows quickly outside the range; pick a reference inside it or measure there.",
    ),
    "arrhenius-curvature": (
        "Arrhenius plot is curved",
        "ln TOF against 1/T bends more than scatter explains: the mechanism, the rate-limiting step or transport "
        "control may change across the range. Quote Ea for a narrower range, or check transport at the hot end.",
    ),
    "leak": (
        "Product fell after its maximum (leak or drift)",
        "Product cannot disappear, yet the readings fall after the trace's maximum: the vessel leaks or the "
        "instrument drifts. The readings after the maximum were left out of the fit, so the rate stands, but check "
        "the seals and the baseline before trusting TON or the plateau. This is not read as deactivation.",
    ),
    "induction-period": (
        "Trace starts slowly, then speeds up (induction period)",
        "The local rate rises well above the rate at the start: the catalyst needed time to activate (reduction, "
        "wetting, a lag in mixing or warming). The integrated rate laws assume the fastest rate at the start, so "
        "the fitted initial rate understates the working catalyst; the largest local rate is given in the message. "
        "Pre-activate the catalyst or discard the lag and repeat.",
    ),
    "blank-not-detected": (
        "Blank rate not detected above noise",
        "This blank's rate is within its own noise of zero, so it gives only an upper limit on the uncatalysed rate "
        "and is left out of the blank model. Where it bounds the blank, the enhancement is reported as a lower bound.",
    ),
    "enhancement-bound": (
        "Enhancement is a lower bound",
        "The blank was not detected above noise at the reference temperature (or at a hotter one), so the "
        "uncatalysed rate is known only to lie below a limit: the catalysed rate is at least this many times the "
        "blank. Run longer blanks or a more sensitive read-out to turn the bound into a number.",
    ),
    "trial-fit-quality": (
        "Several trials are poorly described by the rate laws",
        "Two or more (or most) of this catalyst's trials fit poorly, show patterned residuals or fell back to the "
        "initial slope: its rates and everything derived from them are less certain than their intervals say. "
        "Look at the traces.",
    ),
    "thermal-hazard": (
        "Adiabatic temperature rise estimated",
        "If all reaction heat stayed in the vessel the contents would warm by this much. Bands: low below 50 K "
        "(not flagged; the value is still in the tables), medium 50-200 K, high above 200 K. " + hazard.CAUTION,
    ),
    "pressure-build-up": (
        "Closed-vessel pressure rise estimated",
        "The gas the reaction can release would raise the closed headspace pressure by this much at the trial "
        "temperature. Check it against the vessel's rating and relief. " + hazard.CAUTION,
    ),
}

#: code → 'warning' | 'note' | 'caution'
FLAG_SEVERITY: dict[str, str] = {
    "transport-ea": "warning", "weisz-prater": "warning", "mears": "warning", "loading-slope": "warning",
    "late-shortfall": "warning", "plateau-short": "warning", "deactivation": "warning", "poor-fit": "warning",
    "residual-pattern": "note", "fit-fallback": "warning", "replicate-spread": "warning",
    "blank-dominated": "warning", "single-temperature": "warning", "no-ea": "warning", "few-temperatures": "note",
    "ref-outside-range": "note", "arrhenius-curvature": "note", "thermal-hazard": "caution",
    "pressure-build-up": "caution", "leak": "warning", "induction-period": "warning", "blank-not-detected": "note",
    "enhancement-bound": "note", "trial-fit-quality": "warning",
}
