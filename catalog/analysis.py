"""From stored trials to per-trial and per-catalyst figures: the orchestration of the pure core.

Everything here is a pure function of DataFrames in the store's SI layout, so the same code runs on one campaign
in the CLI, in the app, or on one group of trials inside a distributed engine (e.g. Spark's grouped pandas
functions), unchanged.

Pipeline
--------
1. :func:`trace_amounts` — raw SI signal → amount of product above the first reading (``catalog.signals``).
2. :func:`fit_all` — integrated rate laws for every trial at once (``catalog.batch``).
3. :func:`trial_figures` — blank model, sites, TOF, TON, per-mass/per-area rates, enhancement, photon yield,
   transport numbers and hazard estimates per trial.
4. :func:`catalyst_figures` — Arrhenius and Eyring per catalyst, TOF and enhancement at the reference temperature,
   replicate spread, reaction order, loading-series slope inputs.
"""

from __future__ import annotations

import hashlib
import json
import sys
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from catalog import __version__, arrhenius, batch, hazard, kinetics, photons, signals, sites, transport
from catalog.orders import reaction_order

#: Temperatures within this many kelvin are one set point (replicates), e.g. 35.0 and 35.1 °C.
SET_POINT_TOLERANCE = 0.5


def source_fingerprint(*modules) -> str:
    """Short hash of the source files of ``modules``: cached results made by other code are never served."""
    digest = hashlib.sha256()
    for module in modules:
        digest.update(Path(module.__file__).read_bytes())
    return digest.hexdigest()[:12]


#: Version of the per-trial fit: any change to the fitting or signal-conversion code makes cached fits stale.
FIT_VERSION = f"{__version__}-{source_fingerprint(kinetics, batch, signals, sys.modules[__name__])}"

TRIAL_FIT_COLUMNS = (
    "model", "r0", "r0_se", "k", "k_se", "k_unit", "half_life", "offset", "plateau", "plateau_se", "n_max",
    "plateau_ratio", "final_amount", "final_conversion", "r2", "rmse", "n_points", "late_residual_z", "runs_z",
    "aic_zero", "aic_first", "aic_second",
)


@dataclass(frozen=True)
class Settings:
    """Choices that change the figures; their hash keys the cached results.

    Attributes
    ----------
    reference_temperature : float
        K; TOF, enhancement and rates are compared here.

    The remaining attributes are the diagnostic thresholds used by :mod:`catalog.diagnostics`.
    """

    reference_temperature: float = 308.15
    #: Diagnostic thresholds (see catalog.diagnostics for the meaning and source of each).
    low_ea: float = 20e3
    weisz_prater_limit: float = 0.3
    mears_limit: float = 0.15
    loading_slope_tolerance: float = 0.3
    replicate_cv_limit: float = 0.2
    min_enhancement: float = 2.0
    min_r2: float = 0.98
    runs_z_limit: float = 3.0
    late_residual_z_limit: float = -3.0
    plateau_shortfall: float = 0.85
    curvature_p_limit: float = 0.01
    min_temperatures: int = 3

    def key(self) -> str:
        """A short stable hash of the settings and the code version."""
        text = json.dumps({**asdict(self), "version": FIT_VERSION}, sort_keys=True)
        return hashlib.sha256(text.encode()).hexdigest()[:16]


#: Trial columns each measurement's conversion reads (named as the converters' keywords).
_CONDITIONS = {
    "gas_volume": ("gas_pressure", "gas_temperature"),
    "mass_loss": ("gas_molar_mass",),
    "pressure": ("headspace_volume", "temperature"),
    "concentration": ("liquid_volume",),
}


def trace_amounts(trials: pd.DataFrame, points: pd.DataFrame) -> np.ndarray:
    """Amount of product (mol) at every trace point, relative to the trial's first reading.

    Each trial's first reading is subtracted before conversion: every conversion is linear in the signal, and
    working with increments keeps a 31 g tare or a 101 kPa baseline from swamping a milligram signal in the fit.
    The remaining offset (dead volume, drift before the start) is fitted by the rate-law models.

    .. math:: n_i = f_{\\mathrm{kind}}(y_i - y_0;\\ \\text{trial conditions})

    Parameters
    ----------
    trials : DataFrame
        Store layout, one row per trial, indexed by ``trial_id``.
    points : DataFrame
        ``trial_id, t, value`` in SI, in time order within each trial.
    """
    codes, uniques = pd.factorize(points["trial_id"], sort=False)
    return _amounts(trials.loc[uniques], codes, points["value"].to_numpy(float))


def _amounts(order: pd.DataFrame, codes: np.ndarray, value: np.ndarray) -> np.ndarray:
    """:func:`trace_amounts` on integer trial codes; ``order`` holds the trial rows in code order.

    Trial conditions are gathered per point by code rather than by label, because a label lookup per point of a
    campaign-sized trace table dominates the whole analysis.
    """
    # pd.factorize numbers codes in order of first appearance, so a point opens its trial's series exactly when its
    # code exceeds every code before it: the first readings come out in one pass, without sorting.
    opens = np.ones(len(codes), bool)
    opens[1:] = codes[1:] > np.maximum.accumulate(codes)[:-1]
    delta = value - value[np.flatnonzero(opens)][codes]
    amount = np.full(len(codes), np.nan)
    kinds = order["measurement"].to_numpy(object)
    for kind in signals.MEASUREMENTS:
        at = (kinds == kind)[codes]
        if not at.any():
            continue
        sub = codes[at]
        conditions = {name: order[name].to_numpy(float)[sub] for name in _CONDITIONS[kind]}
        if kind == "gas_volume":
            conditions["over_water"] = order["collected_over_water"].fillna(False).to_numpy(bool)[sub]
        # For mass_loss the converter takes the first reading of the array as zero; every trial's increments
        # start at 0, so the whole group can go through in one call.
        amount[at] = signals.to_amount(kind, delta[at], **conditions)
    return amount


def fit_all(trials: pd.DataFrame, points: pd.DataFrame) -> pd.DataFrame:
    """Fit every trial's trace at once; one row per trial (indexed by trial_id) with the kinetic fit columns."""
    codes, uniques = pd.factorize(points["trial_id"], sort=False)
    order = trials.loc[uniques]
    n_max = (order["limiting_amount"] * order["product_ratio"]).to_numpy(float)
    amount = _amounts(order, codes, points["value"].to_numpy(float))
    fits = batch.fit_traces(codes, points["t"].to_numpy(float), amount, n_max)
    fits.index = pd.Index(uniques, name="trial_id")
    return fits[list(TRIAL_FIT_COLUMNS)]


def blank_charge(trials: pd.DataFrame) -> pd.Series:
    """What the blank rate scales with for each trial: its charge of limiting reactant, mol, or 1.

    The uncatalysed reaction is taken as first order in the limiting reactant, so a blank run with 1 mmol predicts
    half the blank rate of a catalysed trial charged with 2 mmol. When some blank has no ``limiting_amount`` the
    blank model stays in absolute mol/s (every trial assumed charged like the blanks) and the charge is 1; a trial
    without a charge is taken as charged like the median blank.
    """
    amount = trials["limiting_amount"].astype(float)
    blank_amount = amount[trials["catalyst_id"].isna()]
    if blank_amount.empty or not np.isfinite(blank_amount).all():
        return pd.Series(1.0, index=trials.index)
    return amount.where(np.isfinite(amount), float(blank_amount.median()))


def blank_model(trials: pd.DataFrame, fits: pd.DataFrame) -> arrhenius.ArrheniusFit | None:
    """Arrhenius fit of the blank trials' initial rates per unit charge, or None with fewer than two temperatures.

    .. math:: \\frac{r_{0,b}}{\\nu\\, n_{A,0}} = A_b\\, e^{-E_{a,b}/RT}
    """
    blanks = trials.index[trials["catalyst_id"].isna()]
    if len(blanks) == 0:
        return None
    f = fits.loc[fits.index.intersection(blanks)]
    per = trials.loc[f.index, "product_ratio"] * blank_charge(trials).loc[f.index]
    try:
        return arrhenius.fit_arrhenius(trials.loc[f.index, "temperature"], f["r0"] / per, f["r0_se"] / per)
    except (arrhenius.TooFewTemperatures, ValueError):
        return None


def trial_figures(trials: pd.DataFrame, catalysts: pd.DataFrame, fits: pd.DataFrame) -> tuple[pd.DataFrame, object]:
    """Per-trial figures: sites, TOF over the blank, TON, normalised rates, enhancement, photons, transport, hazard.

    Returns the trial table (indexed by trial_id) and the blank Arrhenius model (or None).
    """
    out = trials.join(fits, how="inner")
    blank = blank_model(trials, fits)
    T = out["temperature"].to_numpy(float)
    # Rates on the basis of the limiting reactant (mol converted per s), so a trial read as hydrogen (3 per
    # reactant) and one read as borate (1 per reactant) give the same TOF and share one blank model.
    out["rate"] = out["r0"] / out["product_ratio"]
    out["rate_se"] = out["r0_se"] / out["product_ratio"]
    r0 = out["rate"].to_numpy(float)
    r0_se = out["rate_se"].to_numpy(float)
    catalysed = out["catalyst_id"].notna().to_numpy()
    charge = blank_charge(trials).reindex(out.index).to_numpy(float)

    if blank is not None:
        ln_blank = arrhenius.predict(blank, T)
        blank_rate = np.asarray(ln_blank.value, float) * charge
        # A symmetric standard error from the 95 % interval half-width on the log scale (what TOF propagation needs).
        blank_se = blank_rate * (np.log(np.asarray(ln_blank.high, float)) - np.log(np.asarray(ln_blank.value, float))
                                 ) / blank.coverage_factor
        ratio = arrhenius.enhancement(r0 / charge, r0_se / charge, blank, T)
        out["blank_rate"] = np.where(catalysed, blank_rate, np.nan)
        out["blank_extrapolated"] = np.where(catalysed, np.asarray(ln_blank.extrapolated, bool), False)
        out["enhancement"] = np.where(catalysed, ratio.ratio, np.nan)
        out["enhancement_low"] = np.where(catalysed, ratio.low, np.nan)
        out["enhancement_high"] = np.where(catalysed, ratio.high, np.nan)
    else:
        blank_rate = np.zeros(len(out))
        blank_se = np.zeros(len(out))
        for column in ("blank_rate", "enhancement", "enhancement_low", "enhancement_high"):
            out[column] = np.nan
        out["blank_extrapolated"] = False

    site_table = _site_table(catalysts)
    per_mass = site_table.reindex(out["catalyst_id"])
    mass = out["catalyst_mass"].to_numpy(float)
    n_sites = per_mass["sites_per_kg"].to_numpy(float) * mass
    out["sites"] = n_sites
    out["site_basis"] = per_mass["basis"].to_numpy()
    turnover = sites.tof(r0, r0_se, np.where(catalysed, blank_rate, 0.0), np.where(catalysed, blank_se, 0.0), n_sites)
    out["tof"] = np.where(catalysed, turnover.tof, np.nan)
    out["tof_se"] = np.where(catalysed, turnover.tof_se, np.nan)
    # Turnovers of the limiting reactant, the same basis as the TOF.
    converted = out["final_amount"].to_numpy(float) / out["product_ratio"].to_numpy(float)
    out["ton"] = np.where(catalysed, sites.ton(converted, n_sites), np.nan)
    out["rate_per_mass"] = np.where(catalysed, sites.rate_per_mass(r0, mass), np.nan)
    area = per_mass["surface_area"].to_numpy(float)
    out["rate_per_area"] = np.where(catalysed & np.isfinite(area), sites.rate_per_area(r0, mass, area), np.nan)

    flux = photons.photon_flux(out["light_power"].to_numpy(float), out["light_wavelength"].to_numpy(float))
    out["photon_flux"] = flux
    out["quantum_yield"] = photons.apparent_quantum_yield(r0, flux)

    # Transport numbers for a suspended particle: the rate per particle volume against diffusion into (Weisz-Prater)
    # and film transport to (Mears) one particle.
    consumption = r0
    particle_volume = mass / out["particle_density"].to_numpy(float)
    radius = out["particle_size"].to_numpy(float) / 2
    c_bulk = _reactant_concentration(out)
    out["weisz_prater"] = transport.weisz_prater(consumption / particle_volume, radius, c_bulk,
                                                 out["effective_diffusivity"].to_numpy(float))
    out["mears"] = transport.mears(consumption / mass, out["particle_density"].to_numpy(float), radius, 1.0,
                                   out["mass_transfer_coefficient"].to_numpy(float), c_bulk)

    rise = hazard.adiabatic_temperature_rise(out["reaction_enthalpy"].to_numpy(float),
                                             out["limiting_amount"].to_numpy(float),
                                             out["heat_capacity"].to_numpy(float))
    out["adiabatic_rise"] = rise.delta_t_ad
    out["hazard_band"] = rise.band
    closed = (out["measurement"] == "pressure").to_numpy()
    burst = hazard.pressure_rise(out["n_max"].to_numpy(float), out["headspace_volume"].to_numpy(float), T)
    out["pressure_rise_max"] = np.where(closed, burst.delta_p, np.nan)
    return out, blank


def _reactant_concentration(trials: pd.DataFrame) -> np.ndarray:
    """Initial concentration of the limiting reactant, mol/m³: as given, else amount over liquid volume."""
    given = trials["initial_concentration"].to_numpy(float)
    derived = trials["limiting_amount"].to_numpy(float) / trials["liquid_volume"].to_numpy(float)
    return np.where(np.isfinite(given), given, derived)


def _site_table(catalysts: pd.DataFrame) -> pd.DataFrame:
    """Active sites per kg of catalyst and the basis of the count, one row per catalyst."""
    rows = []
    for cid, c in catalysts.iterrows():
        count = sites.site_amount(1.0, c["metal"] if isinstance(c["metal"], str) else None,
                                  c["metal_loading"], c["dispersion"], c["site_density"])
        rows.append((cid, count.moles, count.basis, c["surface_area"]))
    return pd.DataFrame(rows, columns=["catalyst_id", "sites_per_kg", "basis", "surface_area"]).set_index("catalyst_id")


def _set_points(T: np.ndarray) -> np.ndarray:
    """Group temperatures into set points: sorted values closer than SET_POINT_TOLERANCE share a label."""
    order = np.argsort(T)
    labels = np.empty(len(T), int)
    labels[order] = np.concatenate([[0], np.cumsum(np.diff(T[order]) > SET_POINT_TOLERANCE)]) if len(T) else []
    return labels


def replicate_cv(T: np.ndarray, values: np.ndarray) -> float:
    """Largest coefficient of variation among replicate trials at one set point (NaN without replicates).

    .. math:: CV = s / \\bar{x}
    """
    labels = _set_points(T)
    worst = np.nan
    for label in np.unique(labels):
        v = values[(labels == label) & np.isfinite(values)]
        if len(v) >= 2 and np.mean(v) > 0:
            cv = float(np.std(v, ddof=1) / np.mean(v))
            worst = cv if not np.isfinite(worst) else max(worst, cv)
    return worst


def catalyst_figures(trial_table: pd.DataFrame, catalysts: pd.DataFrame, blank, settings: Settings) -> pd.DataFrame:
    """One row per catalyst: Arrhenius/Eyring on TOF, figures at the reference temperature, spreads and series."""
    T_ref = settings.reference_temperature
    rows = []
    catalysed = trial_table[trial_table["catalyst_id"].notna()]
    blank_ea = blank.ea if blank is not None else np.nan
    charge = blank_charge(trial_table)
    if blank is not None:
        at_ref = arrhenius.predict(blank, T_ref)
        blank_ref = float(np.asarray(at_ref.value))
        blank_log_se = float(np.log(np.asarray(at_ref.high) / blank_ref)) / blank.coverage_factor
    for cid, group in catalysed.groupby("catalyst_id", sort=True):
        T = group["temperature"].to_numpy(float)
        main = standard_series(group)
        row = {"catalyst_id": cid, "n_trials": len(group), "n_temperatures": len(np.unique(_set_points(T))),
               "n_arrhenius": int(main.sum()), "t_min": float(T.min()), "t_max": float(T.max()),
               "site_basis": "; ".join(sorted(set(group["site_basis"].dropna()))),
               "models": "; ".join(f"{m} ×{n}" for m, n in group["model"].value_counts().items())}
        row |= _arrhenius_row(T[main], group["tof"].to_numpy(float)[main], group["tof_se"].to_numpy(float)[main], T_ref)
        row["delta_ea_blank"] = row["ea"] - blank_ea
        n_sites = float(np.nanmedian(group["sites"])) if group["sites"].notna().any() else np.nan
        mass = float(np.nanmedian(group["catalyst_mass"]))
        if blank is not None and np.isfinite(row["tof_ref"]):
            # Enhancement at T_ref for the catalyst's median charge and sites: E = 1 + TOF·N / r_b(T_ref), with
            # var ln(E − 1) = var ln TOF + var ln r_b: the blank model's uncertainty often dominates.
            gain = row["tof_ref"] * n_sites / (blank_ref * float(np.median(charge.loc[group.index[main]])))
            spread = stats.norm.ppf(0.975) * np.hypot(row["tof_ref_log_se"], blank_log_se)
            row["enhancement_ref"] = 1 + gain
            row["enhancement_ref_low"] = 1 + gain * np.exp(-spread)
            row["enhancement_ref_high"] = 1 + gain * np.exp(spread)
            row["blank_extrapolated"] = bool(np.asarray(at_ref.extrapolated))
        else:
            row |= {"enhancement_ref": np.nan, "enhancement_ref_low": np.nan, "enhancement_ref_high": np.nan,
                    "blank_extrapolated": False}
        rate_ref = row["tof_ref"] * n_sites
        row["rate_per_mass_ref"] = rate_ref / mass if np.isfinite(mass) else np.nan
        area = catalysts.loc[cid, "surface_area"] if cid in catalysts.index else np.nan
        row["rate_per_area_ref"] = rate_ref / (mass * area) if np.isfinite(area) else np.nan
        row["ton_max"] = float(np.nanmax(group["ton"])) if group["ton"].notna().any() else np.nan
        row["replicate_cv"] = replicate_cv(T[main], group["tof"].to_numpy(float)[main])
        row |= _order_row(group)
        row["median_sites"] = n_sites
        row["min_enhancement"] = float(np.nanmin(group["enhancement"])) if group["enhancement"].notna().any() else np.nan
        row["max_weisz_prater"] = _nanmax(group["weisz_prater"])
        row["max_mears"] = _nanmax(group["mears"])
        row["max_adiabatic_rise"] = _nanmax(group["adiabatic_rise"])
        rows.append(row)
    out = pd.DataFrame(rows)
    if out.empty:
        return out
    out = out.set_index("catalyst_id")
    return out.join(catalysts[["metal", "support", "metal_loading", "dispersion", "price_per_gram", "description"]],
                    how="left")


def standard_series(group: pd.DataFrame) -> np.ndarray:
    """Trials of one catalyst run at its standard initial concentration: the Arrhenius and replicate set.

    TOF of a reaction that is not zero order depends on concentration, so trials of a concentration series would
    bend an Arrhenius plot; illuminated trials are kept apart for the same reason. The standard concentration is the one measured at the most set points (then the one
    with the most trials); trials without a known concentration count as one more group.
    """
    c = _reactant_concentration(group)
    level = np.where(np.isfinite(c), np.round(np.log(np.where(c > 0, c, 1.0)), 3), np.inf)
    # Illuminated trials measure a different (photo-assisted) rate: they never join the dark series.
    lit = np.nan_to_num(group["light_power"].to_numpy(float)) > 0
    key = np.array([f"{'lit' if on else 'dark'} {x}" for on, x in zip(lit, level)])
    labels = _set_points(group["temperature"].to_numpy(float))
    best, best_score = None, (-1, -1)
    for value in np.unique(key):
        at = key == value
        score = (len(np.unique(labels[at])), int(at.sum()))
        if score > best_score:
            best, best_score = at, score
    return best


def _nanmax(series: pd.Series) -> float:
    return float(np.nanmax(series)) if series.notna().any() else np.nan


_ARRHENIUS_EMPTY = dict.fromkeys(
    ["ea", "ea_se", "ea_low", "ea_high", "ln_a", "ln_a_low", "ln_a_high", "dh", "dh_low", "dh_high", "ds", "ds_low",
     "ds_high", "curvature_p", "birge", "r2_arrhenius", "tof_ref_log_se"], np.nan)


def _arrhenius_row(T: np.ndarray, tof: np.ndarray, tof_se: np.ndarray, T_ref: float) -> dict:
    """Arrhenius and Eyring on TOF, and TOF at T_ref with its 95 % interval (empty cells when it cannot be had)."""
    row = dict(_ARRHENIUS_EMPTY)
    fit = None
    good = np.isfinite(tof) & (tof > 0)
    # Readings a few tenths of a kelvin apart are replicates at one set point, not an Arrhenius series.
    if len(np.unique(_set_points(T[good]))) >= 2:
        try:
            fit = arrhenius.fit_arrhenius(T, tof, tof_se)
        except (arrhenius.TooFewTemperatures, ValueError):
            fit = None
    if fit is None:
        # One set point: TOF at T_ref only if T_ref is that set point (no Ea, so no extrapolation).
        at_ref = good & (np.abs(T - T_ref) <= SET_POINT_TOLERANCE)
        if at_ref.sum() >= 1:
            values, stated = tof[at_ref], tof_se[at_ref]
            n = len(values)
            mean = float(np.mean(values))
            # The standard error of the mean is the larger of the replicate scatter and the trials' own errors;
            # with n replicates the 95 % interval takes Student t on n − 1 degrees of freedom (a single trial
            # has only its stated error, so the normal quantile).
            stated_sem = float(np.sqrt(np.mean(stated**2) / n))
            sem = max(float(np.std(values, ddof=1) / np.sqrt(n)), stated_sem) if n > 1 else stated_sem
            half = (stats.t.ppf(0.975, n - 1) if n > 1 else stats.norm.ppf(0.975)) * sem
            row |= {"tof_ref": mean, "tof_ref_low": max(mean - half, 0.0), "tof_ref_high": mean + half,
                    "tof_ref_extrapolated": False, "tof_ref_log_se": sem / mean}
        else:
            row |= {"tof_ref": np.nan, "tof_ref_low": np.nan, "tof_ref_high": np.nan,
                    "tof_ref_extrapolated": bool(good.any()), "tof_ref_log_se": np.nan}
        return row
    eyring = arrhenius.fit_eyring(T, tof, tof_se)
    pred = arrhenius.predict(fit, T_ref)
    row |= {
        "ea": fit.ea, "ea_se": fit.ea_se, "ea_low": fit.ea_low, "ea_high": fit.ea_high,
        "ln_a": fit.ln_a, "ln_a_low": fit.ln_a_low, "ln_a_high": fit.ln_a_high,
        "dh": eyring.dh, "dh_low": eyring.dh_low, "dh_high": eyring.dh_high,
        "ds": eyring.ds, "ds_low": eyring.ds_low, "ds_high": eyring.ds_high,
        "curvature_p": fit.curvature_p, "birge": fit.birge, "r2_arrhenius": fit.r2,
        "tof_ref": float(np.asarray(pred.value)), "tof_ref_low": float(np.asarray(pred.low)),
        "tof_ref_high": float(np.asarray(pred.high)), "tof_ref_extrapolated": bool(np.asarray(pred.extrapolated)),
        "tof_ref_log_se": float(np.log(np.asarray(pred.high) / np.asarray(pred.value))) / fit.coverage_factor,
    }
    return row


def _order_row(group: pd.DataFrame) -> dict:
    """Reaction order from trials at one set point that differ in initial concentration (the largest such series)."""
    empty = {"order": np.nan, "order_low": np.nan, "order_high": np.nan, "order_temperature": np.nan}
    c = _reactant_concentration(group)
    labels = _set_points(group["temperature"].to_numpy(float))
    dark = np.nan_to_num(group["light_power"].to_numpy(float)) <= 0
    best = None
    for label in np.unique(labels):
        at = (labels == label) & np.isfinite(c) & (c > 0) & dark
        if len(np.unique(np.round(c[at], 9))) >= 3 and (best is None or at.sum() > best.sum()):
            best = at
    if best is None:
        return empty
    try:
        fit = reaction_order(c[best], group["rate"].to_numpy(float)[best], group["rate_se"].to_numpy(float)[best])
    except ValueError:
        return empty
    return {"order": fit.order, "order_low": fit.low, "order_high": fit.high,
            "order_temperature": float(np.mean(group["temperature"].to_numpy(float)[best]))}


@dataclass(frozen=True)
class Analysis:
    """Everything one analysis produced."""

    trials: pd.DataFrame      # per trial, indexed by trial_id
    catalysts: pd.DataFrame   # per catalyst, indexed by catalyst_id
    blank: object             # ArrheniusFit of the blank trials, or None
    settings: Settings


def analyse(catalysts: pd.DataFrame, trials: pd.DataFrame, points: pd.DataFrame, settings: Settings,
            fits: pd.DataFrame | None = None) -> Analysis:
    """Run the whole pipeline on one campaign (or any group of trials) in the store's SI layout.

    ``fits`` may carry cached kinetic fits (indexed by trial_id); only trials missing from it are fitted.
    """
    trials = trials.set_index("trial_id") if "trial_id" in trials.columns else trials
    catalysts = catalysts.set_index("catalyst_id") if "catalyst_id" in catalysts.columns else catalysts
    todo = trials.index if fits is None else trials.index.difference(fits.index)
    if len(todo):
        # A cold start fits every trial: no need to copy a campaign-sized points frame through a filter.
        fresh = fit_all(trials, points if len(todo) == len(trials) else points[points["trial_id"].isin(todo)])
        fits = fresh if fits is None else pd.concat([fits.loc[fits.index.intersection(trials.index)], fresh])
    else:
        fits = fits.loc[trials.index]
    table, blank = trial_figures(trials, catalysts, fits)
    return Analysis(table, catalyst_figures(table, catalysts, blank, settings), blank, settings)

