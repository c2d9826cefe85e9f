"""Diagnostic flags: warnings about transport control, deactivation, fit quality, data coverage and hazards.

Every flag is a row with a short code, a severity, a plain-language message that carries the numbers behind it, and
the value compared with its threshold. Flags are warnings only: they never change a figure or drop a record, and
what the analysis chose (the rate law, the site basis) is information, not a flag. :data:`FLAG_CODES` explains each
code and what to do about it; exports, the report and the app show that text next to the code.

Severities
----------
``warning``
    The figure may not mean what it seems (a transport-limited rate is not a catalyst property).
``note``
    Worth knowing when comparing figures (an extrapolated reference value, a curved Arrhenius plot).
``caution``
    A screening hazard estimate; it always carries :data:`catalog.core.hazard.CAUTION`.

Sources of the thresholds (values live in :class:`catalog.analysis.Settings`)
-----------------------------------------------------------------------------
- apparent Ea below about 20 kJ/mol suggests transport control (common practice, no source); strong pore diffusion
  only halves the intrinsic Ea (Thiele 1939), so a pore-limited rate with an intrinsic Ea of 100 kJ/mol shows about
  50 kJ/mol and passes this check. That is why the Weisz-Prater and loading-series checks exist beside it;
- Weisz-Prater number above 0.3 (Weisz and Prater, Adv. Catal. 6, 143 (1954));
- Mears number above 0.15 (Mears, Ind. Eng. Chem. Process Des. Dev. 10, 541 (1971));
- loading series at constant dispersion: ln(rate per mass) against ln(sites per mass) has slope 1 under kinetic
  control and about 0.5 under strong pore diffusion (Koros and Nowak, Chem. Eng. Sci. 22, 470 (1967); Madon and
  Boudart, Ind. Eng. Chem. Fundam. 21, 438 (1982));
- Arrhenius curvature at p < 0.001: a campaign tests every catalyst, so a 1 % level would flag about one clean
  catalyst in a hundred by chance; 0.1 % keeps the campaign-wide false-alarm rate near 10 % for a hundred
  catalysts (a Bonferroni-style choice, common practice, no source);
- adiabatic temperature rise bands 50 K and 200 K (Stoessel, Thermal Safety of Chemical Processes, 2008).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from catalog.analysis.flag_codes import FLAG_CODES, FLAG_SEVERITY
from catalog.core import hazard
from catalog.core.linefit import fit_line
from catalog.core.stats import Z95
from catalog.units import celsius

__all__ = ["DEACTIVATION_MIN_TRIALS", "DISPERSION_MATCH", "FLAG_CODES", "FLAG_COLUMNS", "FLAG_SEVERITY",
           "LEVELLED_FRACTION", "ROLLUP_MIN_FRACTION", "evaluate", "loading_series"]

FLAG_COLUMNS = ("scope", "record_id", "code", "severity", "message", "value", "threshold")

#: A trace that reached this fraction of its own fitted plateau has levelled off: the rate has died, so a short
#: plateau is real rather than an extrapolation of a slow trial (common practice, no source).
LEVELLED_FRACTION = 0.95
#: Dispersions within this relative difference count as "the same" in a loading series (common practice, no
#: source): chemisorption dispersions are rarely better than ±10 %.
DISPERSION_MATCH = 0.10
#: A catalyst is flagged for deactivation when at least this many of its trials show it, or more than half of them.
#: One stray trial among many is more likely a trial problem (a leak, a mis-weighed charge) than the catalyst; two
#: independent trials make a pattern.
DEACTIVATION_MIN_TRIALS = 2
#: ... and, among many trials, at least this fraction of them (common practice, no source): every per-trial check
#: has a false-alarm rate, so among hundreds of clean trials a few are flagged by chance (measured: 2 of ~480 on a
#: clean invented campaign of 10^4 trials). Up to 20 trials a catalyst the count of two alone decides, as before.
ROLLUP_MIN_FRACTION = 0.10
#: A well-determined free plateau (relative standard error below this) is compared with n_max directly, whether or
#: not the trace has levelled off (common practice, no source).
PLATEAU_WELL_DETERMINED = 0.05
#: ... and counts as short when below n_max by more than this fraction and by more than 3 of its standard errors
#: (a few per cent is within the usual calibration of a burette or a charge; common practice, no source).
PLATEAU_MARGIN = 0.05

def _flag(scope: str, record_id, code: str, message: str, value: float, threshold: float) -> dict:
    return {"scope": scope, "record_id": str(record_id), "code": code, "severity": FLAG_SEVERITY[code],
            "message": message, "value": float(value), "threshold": float(threshold)}


def _column(table: pd.DataFrame, name: str) -> pd.Series:
    """A numeric column, or all-NaN when the table lacks it (hand-built or older cached tables)."""
    if name in table.columns:
        return pd.to_numeric(table[name], errors="coerce").astype(float)
    return pd.Series(np.nan, index=table.index, dtype=float)


def _kelvin_text(T: float) -> str:
    return f"{T:.2f} K ({celsius(T):.1f} °C)"


def _trial_flags(trials: pd.DataFrame, settings) -> list[dict]:
    """Fit quality, deactivation, blank, transport and hazard flags of single trials."""
    s = settings
    out: list[dict] = []
    # Numbers as arrays and flagged trials by position: a pandas comparison per rule and a label look-up per flagged
    # value cost ~40 ms at 10^4 trials with 500 flags, for the same flags.
    ids = trials.index.to_numpy(object)
    n = len(ids)
    catalysed = (trials["catalyst_id"].notna().to_numpy(bool) if "catalyst_id" in trials.columns
                 else np.ones(n, bool))
    model = trials["model"].to_numpy(object) if "model" in trials.columns else np.full(n, None, object)
    r2 = _column(trials, "r2").to_numpy()
    runs_z = _column(trials, "runs_z").to_numpy()
    late_z = _column(trials, "late_residual_z").to_numpy()
    plateau = _column(trials, "plateau_ratio").to_numpy()
    final = _column(trials, "final_conversion").to_numpy()
    ratio = _column(trials, "enhancement").to_numpy()
    wp = _column(trials, "weisz_prater").to_numpy()
    mears = _column(trials, "mears").to_numpy()
    rise = _column(trials, "adiabatic_rise").to_numpy()
    burst = _column(trials, "pressure_rise_max").to_numpy()
    temperature = _column(trials, "temperature").to_numpy()
    plateau_se = _column(trials, "plateau_se").to_numpy()
    plateau_abs = _column(trials, "plateau").to_numpy()
    fixed = (trials["plateau_fixed"].fillna(False).astype(bool).to_numpy() if "plateau_fixed" in trials.columns
             else False)
    leak = _column(trials, "leak_cut").to_numpy()
    induction_z = _column(trials, "induction_z").to_numpy()
    max_rate = _column(trials, "max_rate").to_numpy()
    r0 = _column(trials, "r0").to_numpy()
    undetected = (trials["blank_undetected"].fillna(False).astype(bool).to_numpy() if "blank_undetected" in
                  trials.columns else np.zeros(n, bool))

    for i in np.flatnonzero(leak > 0):
        out.append(_flag("trial", ids[i], "leak", f"The readings fall after the trace's maximum; the last "
                         f"{leak[i]:.0f} were left out of the fit.", leak[i], 0.0))
    for i in np.flatnonzero(catalysed & (induction_z > s.induction_z_limit)):
        out.append(_flag("trial", ids[i], "induction-period",
                         f"The local rate rises to {max_rate[i]:.3g} mol/s, well above the rate of the first "
                         f"readings (z = {induction_z[i]:.1f}, limit {s.induction_z_limit:g}); the fitted initial "
                         f"rate {r0[i]:.3g} mol/s does not describe the working catalyst.", induction_z[i],
                         s.induction_z_limit))
    for i in np.flatnonzero(~catalysed & undetected):
        out.append(_flag("trial", ids[i], "blank-not-detected",
                         f"Blank rate {r0[i]:.3g} mol/s is within {Z95:.2f} standard errors of zero.",
                         r0[i], 0.0))

    for i in np.flatnonzero((model == "initial_slope") | (model == "none")):
        what = "no rate could be fitted" if model[i] == "none" else "the rate is the slope of the early points"
        # value/threshold: the rate laws tried vs fitted carry no number; 0 of 1 fitted keeps the columns numeric.
        out.append(_flag("trial", ids[i], "fit-fallback", f"No integrated rate law fitted this trace; {what}.", 0.0,
                         1.0))
    for i in np.flatnonzero(r2 < s.min_r2):
        out.append(_flag("trial", ids[i], "poor-fit",
                         f"R² of the rate-law fit is {r2[i]:.4f}, below {s.min_r2:g}.", r2[i], s.min_r2))
    for i in np.flatnonzero(np.abs(runs_z) > s.runs_z_limit):
        out.append(_flag("trial", ids[i], "residual-pattern",
                         f"Runs test of the residual signs gives z = {runs_z[i]:.1f}; beyond ±{s.runs_z_limit:g} "
                         "the residuals are not random.", runs_z[i], s.runs_z_limit))
    for i in np.flatnonzero(catalysed & (late_z < s.late_residual_z_limit)):
        out.append(_flag("trial", ids[i], "late-shortfall",
                         f"The last third of the trace lies below the fitted curve (mean residual z = "
                         f"{late_z[i]:.1f}, limit {s.late_residual_z_limit:g}).", late_z[i],
                         s.late_residual_z_limit))
    # A short plateau alone is not enough: a slow trial stopped early has an extrapolated plateau that can be anything.
    # Only when the trace has reached its own plateau (rate died) is the shortfall measured rather than guessed.
    levelled = final >= LEVELLED_FRACTION * plateau
    # A free plateau known to a few per cent is tested against n_max with its own standard error, levelled or not.
    determined = ~fixed & (plateau_se < PLATEAU_WELL_DETERMINED * plateau_abs)
    with np.errstate(divide="ignore", invalid="ignore"):  # NaN or inf where a plateau is 0 or missing, as in pandas
        n_max = plateau_abs / plateau
    below = (plateau < 1 - PLATEAU_MARGIN) & (n_max - plateau_abs > 3 * plateau_se)
    short = (plateau < s.plateau_shortfall) & levelled
    for i in np.flatnonzero(catalysed & (plateau > 0) & (short | (determined & below))):
        out.append(_flag("trial", ids[i], "plateau-short",
                         f"The trace levelled off at {plateau[i]:.0%} of full conversion (reached "
                         f"{final[i]:.0%}), below {s.plateau_shortfall:.0%}.", plateau[i], s.plateau_shortfall))
    for i in np.flatnonzero(catalysed & (ratio < s.min_enhancement)):
        out.append(_flag("trial", ids[i], "blank-dominated",
                         f"Rate is {ratio[i]:.2f} times the blank rate at {_kelvin_text(temperature[i])}, below "
                         f"{s.min_enhancement:g} times.", ratio[i], s.min_enhancement))
    for i in np.flatnonzero(wp > s.weisz_prater_limit):
        out.append(_flag("trial", ids[i], "weisz-prater",
                         f"Weisz-Prater number {wp[i]:.3g} exceeds {s.weisz_prater_limit:g}.", wp[i],
                         s.weisz_prater_limit))
    for i in np.flatnonzero(mears > s.mears_limit):
        out.append(_flag("trial", ids[i], "mears", f"Mears number {mears[i]:.3g} exceeds {s.mears_limit:g}.",
                         mears[i], s.mears_limit))
    # A rise in the low band is reported in the tables but is no hazard worth a flag on every trial.
    for i in np.flatnonzero(rise >= hazard.LOW_RISE):
        out.append(_thermal_flag("trial", ids[i], rise[i]))
    for i in np.flatnonzero(~np.isnan(burst)):
        out.append(_flag("trial", ids[i], "pressure-build-up",
                         f"Closed vessel: complete reaction would raise the headspace pressure by about "
                         f"{burst[i] / 1e3:.0f} kPa at {_kelvin_text(temperature[i])}. {hazard.CAUTION}",
                         burst[i], 0.0))
    return out


def _thermal_flag(scope: str, record_id, delta_t: float) -> dict:
    """Adiabatic-rise caution (medium or high band); threshold is the top of the low band, 50 K."""
    band = "medium" if delta_t <= hazard.HIGH_RISE else "high"
    return _flag(scope, record_id, "thermal-hazard",
                 f"Adiabatic temperature rise about {delta_t:.0f} K: {band} band (low below {hazard.LOW_RISE:.0f} K, "
                 f"high above {hazard.HIGH_RISE:.0f} K). {hazard.CAUTION}", delta_t, hazard.LOW_RISE)


def _deactivation_rollup(trials: pd.DataFrame, trial_flags: list[dict]) -> list[dict]:
    """Catalyst-level deactivation from its trials' late-shortfall and plateau-short flags.

    Flagged when ``n_flagged ≥ max(DEACTIVATION_MIN_TRIALS, ROLLUP_MIN_FRACTION n_trials)`` or
    ``n_flagged > n_trials / 2``; value is the fraction of trials flagged, threshold ½. The same rule rolls poor
    fits up to ``trial-fit-quality``.
    """
    if "catalyst_id" not in trials.columns:
        return []
    catalysed = trials[trials["catalyst_id"].notna()]
    # Counted for every catalyst at once: a pandas group and a set look-up per trial per catalyst cost ~0.7 ms per
    # catalyst (measured at 500 catalysts).
    codes, ids = pd.factorize(catalysed["catalyst_id"], sort=True)
    # (the ids as a list first: iterating a pandas string index goes through pyarrow label by label, ~10x slower)
    record = pd.Index([str(t) for t in catalysed.index.tolist()])

    def count(flag_codes) -> np.ndarray:
        hit = {f["record_id"] for f in trial_flags if f["code"] in flag_codes}
        return np.bincount(codes, weights=record.isin(hit), minlength=len(ids)).astype(int)

    total = np.bincount(codes, minlength=len(ids))
    late = count(("late-shortfall", "plateau-short"))
    fit_quality = count(("poor-fit", "residual-pattern", "fit-fallback"))
    leaks, lags = count(("leak",)), count(("induction-period",))
    out = []
    for i, cid in enumerate(ids):
        n = int(total[i])
        k = int(late[i])
        several = max(DEACTIVATION_MIN_TRIALS, ROLLUP_MIN_FRACTION * n)
        if k >= several or k > n / 2:
            out.append(_flag("catalyst", cid, "deactivation",
                             f"{k} of {n} trials slow down late or level off short of full conversion.", k / n, 0.5))
        k = int(fit_quality[i])
        if k >= several or k > n / 2:
            out.append(_flag("catalyst", cid, "trial-fit-quality",
                             f"{k} of {n} trials fit poorly, show patterned residuals or fell back to the initial "
                             "slope.", k / n, 0.5))
        # A leak or a slow start in any trial reaches the catalyst row: each bears on how far its figures hold.
        for code, which, what in (("leak", leaks, "show a fall in product after the maximum (cut there)"),
                                  ("induction-period", lags, "start slowly and then speed up")):
            k = int(which[i])
            if k:
                out.append(_flag("catalyst", cid, code, f"{k} of {n} trials {what}.", k / n, 0.0))
    return out


def loading_series(catalysts: pd.DataFrame) -> pd.DataFrame:
    """Loading series and their log-log slope.

    A series is explicit: catalysts of one family (same metal, same support and the same stated preparation, the
    ``description``) at matching dispersion and at least two loadings. Two unrelated catalysts that merely share a
    metal and a support are not a series: without a stated preparation a catalyst joins no series.

    For each series the slope b of

    .. math:: \\ln r_m(T_\\mathrm{ref}) = a + b\\,\\ln n_{s,m}

    with :math:`r_m` the rate per mass and :math:`n_{s,m} = r_m / \\mathrm{TOF}` the sites per mass, weighted by
    :math:`\\sigma_{\\ln r} = (\\ln \\mathrm{TOF}_{high} - \\ln \\mathrm{TOF}_{low})/(2 z_{0.975})`. Kinetic
    control gives b = 1 (Koros and Nowak 1967; Madon and Boudart 1982).

    Returns
    -------
    DataFrame
        One row per catalyst in a series: ``series`` (label), ``slope``, ``slope_low``, ``slope_high`` (95 %),
        ``n_loadings``; indexed by catalyst_id. Empty when there is no series.
    """
    columns = ["series", "slope", "slope_low", "slope_high", "n_loadings"]
    needed = {"metal", "support", "dispersion", "metal_loading", "rate_per_mass_ref", "tof_ref"}
    if not needed <= set(catalysts.columns):
        return pd.DataFrame(columns=columns, index=pd.Index([], name="catalyst_id"))
    rate = _column(catalysts, "rate_per_mass_ref")
    tof = _column(catalysts, "tof_ref")
    dispersion = _column(catalysts, "dispersion")
    family = (catalysts["description"].astype(object).where(catalysts["description"].notna(), "")
              if "description" in catalysts.columns else pd.Series("", catalysts.index))
    family = family.map(lambda d: str(d).strip())
    usable = ((rate > 0) & (tof > 0) & (dispersion > 0) & catalysts["metal"].notna() & catalysts["support"].notna()
              & (family != ""))
    ln_se = (np.log(_column(catalysts, "tof_ref_high")) - np.log(_column(catalysts, "tof_ref_low"))) / (2 * Z95)
    rows = []
    keyed = catalysts[usable].assign(_family=family[usable])
    for (metal, support, _), group in keyed.groupby(["metal", "support", "_family"], sort=True):
        if len(group) < 2:
            continue  # one catalyst is one loading, never a series (its label look-ups cost ~4 ms a catalyst)
        # Dispersion clusters: sorted ln D with a gap wider than the match tolerance starts a new cluster.
        ln_d = np.log(dispersion[group.index]).sort_values()
        cluster = np.concatenate([[0], np.cumsum(np.diff(ln_d.to_numpy()) > np.log1p(DISPERSION_MATCH))])
        for label in np.unique(cluster):
            ids = ln_d.index[cluster == label]
            x = np.log((rate[ids] / tof[ids]).to_numpy())
            if len(np.unique(np.round(x, 3))) < 2:
                continue
            y = np.log(rate[ids].to_numpy())
            se = ln_se[ids].to_numpy()
            weighted = bool(np.all(np.isfinite(se) & (se > 0)))
            line = fit_line(x, y, se if weighted else None)
            half = line.coverage_factor * np.sqrt(line.cov[1, 1])
            name = f"{metal}/{support}, dispersion {np.exp(ln_d[ids].mean()):.0%}"
            for cid in ids:
                rows.append({"catalyst_id": cid, "series": name, "slope": line.slope, "slope_low": line.slope - half,
                             "slope_high": line.slope + half, "n_loadings": len(np.unique(np.round(x, 3)))})
    if not rows:
        return pd.DataFrame(columns=columns, index=pd.Index([], name="catalyst_id"))
    return pd.DataFrame(rows).set_index("catalyst_id")[columns]


def _catalyst_flags(catalysts: pd.DataFrame, settings) -> list[dict]:
    """Transport, coverage, replicate, blank, Arrhenius and hazard flags of catalysts."""
    s = settings
    out: list[dict] = []
    ea = _column(catalysts, "ea")
    ea_low = _column(catalysts, "ea_low")
    ea_high = _column(catalysts, "ea_high")
    n_temperatures = _column(catalysts, "n_temperatures")
    cv = _column(catalysts, "replicate_cv")
    ratio = _column(catalysts, "enhancement_ref")
    curvature = _column(catalysts, "curvature_p")
    wp = _column(catalysts, "max_weisz_prater")
    mears = _column(catalysts, "max_mears")
    rise = _column(catalysts, "max_adiabatic_rise")
    tof_ref = _column(catalysts, "tof_ref")
    t_min = _column(catalysts, "t_min")
    t_max = _column(catalysts, "t_max")
    T_ref = s.reference_temperature
    extrapolated = (catalysts["tof_ref_extrapolated"].fillna(False).astype(bool)
                    if "tof_ref_extrapolated" in catalysts.columns else pd.Series(False, catalysts.index))

    for cid in catalysts.index[ea < s.low_ea]:
        out.append(_flag("catalyst", cid, "transport-ea",
                         f"Apparent Ea {ea[cid] / 1e3:.1f} kJ/mol (95 % interval {ea_low[cid] / 1e3:.1f} to "
                         f"{ea_high[cid] / 1e3:.1f}) is below {s.low_ea / 1e3:g} kJ/mol.", ea[cid], s.low_ea))
    # the limit for the measured order where a concentration series gave one, else the order-free setting
    wp_limit = _column(catalysts, "weisz_prater_limit").fillna(s.weisz_prater_limit)
    for cid in catalysts.index[wp > wp_limit]:
        out.append(_flag("catalyst", cid, "weisz-prater",
                         f"Largest Weisz-Prater number among its trials is {wp[cid]:.3g}, above "
                         f"{wp_limit[cid]:.3g}.", wp[cid], wp_limit[cid]))
    bounded = (catalysts["enhancement_ref_bound"].fillna(False).astype(bool)
               if "enhancement_ref_bound" in catalysts.columns else pd.Series(False, catalysts.index))
    low_bound = _column(catalysts, "enhancement_ref_low")
    for cid in catalysts.index[bounded]:
        out.append(_flag("catalyst", cid, "enhancement-bound",
                         f"The blank is not detected above noise at {_kelvin_text(s.reference_temperature)}: the "
                         f"catalysed rate is at least {low_bound[cid]:.3g} times the blank (95 %).", low_bound[cid],
                         0.0))
    for cid in catalysts.index[mears > s.mears_limit]:
        out.append(_flag("catalyst", cid, "mears", f"Largest Mears number among its trials is {mears[cid]:.3g}, "
                         f"above {s.mears_limit:g}.", mears[cid], s.mears_limit))
    series = loading_series(catalysts)
    for cid, row in series.iterrows():
        # Flag only when the slope is off by more than the tolerance and its own 95 % interval excludes 1.
        excludes_one = np.isfinite(row["slope_low"]) and not (row["slope_low"] <= 1.0 <= row["slope_high"])
        if abs(row["slope"] - 1.0) > s.loading_slope_tolerance and excludes_one:
            bound = 1.0 + np.sign(row["slope"] - 1.0) * s.loading_slope_tolerance
            interval = (f" (95 % interval {row['slope_low']:.2f} to {row['slope_high']:.2f})"
                        if np.isfinite(row["slope_low"]) else "")
            out.append(_flag("catalyst", cid, "loading-slope",
                             f"In the loading series {row['series']} ({row['n_loadings']} loadings) ln(rate per "
                             f"gram) rises with slope {row['slope']:.2f}{interval} against ln(sites per gram); "
                             f"kinetic control gives 1 ± {s.loading_slope_tolerance:g}.", row["slope"], bound))
    for cid in catalysts.index[cv > s.replicate_cv_limit]:
        out.append(_flag("catalyst", cid, "replicate-spread",
                         f"Replicate TOFs at one temperature vary by {cv[cid]:.0%} (coefficient of variation), "
                         f"above {s.replicate_cv_limit:.0%}.", cv[cid], s.replicate_cv_limit))
    for cid in catalysts.index[ratio < s.min_enhancement]:
        out.append(_flag("catalyst", cid, "blank-dominated",
                         f"At {_kelvin_text(T_ref)} the catalysed rate is {ratio[cid]:.2f} times the blank, below "
                         f"{s.min_enhancement:g} times.", ratio[cid], s.min_enhancement))
    for cid in catalysts.index[n_temperatures < 2]:
        out.append(_flag("catalyst", cid, "single-temperature",
                         f"All trials at one temperature, {_kelvin_text(t_min[cid])}; no activation energy.",
                         n_temperatures[cid], 2))
    for cid in catalysts.index[(n_temperatures >= 2) & ea.isna()]:
        out.append(_flag("catalyst", cid, "no-ea",
                         f"Trials at {n_temperatures[cid]:.0f} temperatures, but no Arrhenius fit: fewer than two "
                         "temperatures have a usable TOF.", n_temperatures[cid], 2))
    for cid in catalysts.index[(n_temperatures >= 2) & (n_temperatures < s.min_temperatures) & ea.notna()]:
        out.append(_flag("catalyst", cid, "few-temperatures",
                         f"Ea rests on {n_temperatures[cid]:.0f} temperatures; at least {s.min_temperatures} are "
                         "recommended.", n_temperatures[cid], s.min_temperatures))
    for cid in catalysts.index[extrapolated]:
        how = ("the TOF there is extrapolated along the Arrhenius line" if np.isfinite(tof_ref[cid])
               else "without an Ea there is no TOF there")
        # value: distance (K) from the measured range, threshold 0 K.
        gap = max(t_min[cid] - T_ref, T_ref - t_max[cid], 0.0)
        out.append(_flag("catalyst", cid, "ref-outside-range",
                         f"Reference {_kelvin_text(T_ref)} lies outside the measured {_kelvin_text(t_min[cid])} to "
                         f"{_kelvin_text(t_max[cid])}; {how}.", gap, 0.0))
    for cid in catalysts.index[curvature < s.curvature_p_limit]:
        out.append(_flag("catalyst", cid, "arrhenius-curvature",
                         f"A quadratic term in 1/T improves the Arrhenius fit beyond chance (p = {curvature[cid]:.2g}, "
                         f"limit {s.curvature_p_limit:g}).", curvature[cid], s.curvature_p_limit))
    for cid in catalysts.index[rise >= hazard.LOW_RISE]:
        out.append(_thermal_flag("catalyst", cid, rise[cid]))
    return out


def evaluate(result, settings) -> pd.DataFrame:
    """Every diagnostic flag of one analysis.

    Parameters
    ----------
    result : catalog.analysis.Analysis
        Anything with ``trials`` (indexed by trial_id) and ``catalysts`` (indexed by catalyst_id) tables in the
        layout of :func:`catalog.analysis.analyse`; missing columns simply raise no flag.
    settings : catalog.analysis.Settings
        Thresholds.

    Returns
    -------
    DataFrame
        Columns :data:`FLAG_COLUMNS`: scope ('trial' | 'catalyst'), record_id, code (a key of :data:`FLAG_CODES`),
        severity ('warning' | 'caution' | 'note'), message, value, threshold. Sorted by scope, record and code.
    """
    trial_flags = _trial_flags(result.trials, settings) if len(result.trials) else []
    rows = trial_flags + (_deactivation_rollup(result.trials, trial_flags) if len(result.trials) else [])
    if len(result.catalysts):
        rows += _catalyst_flags(result.catalysts, settings)
    if not rows:
        return pd.DataFrame({c: pd.Series(dtype=float if c in ("value", "threshold") else object)
                             for c in FLAG_COLUMNS})
    table = pd.DataFrame(rows, columns=list(FLAG_COLUMNS))
    return table.sort_values(["scope", "record_id", "code"], kind="stable").reset_index(drop=True)
