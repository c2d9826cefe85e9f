"""Per-trial figures: signal to amount, the kinetic fits, the blank model, TOF, TON and the trial-level numbers.

1. :func:`trace_amounts` — raw SI signal → amount of product above the first reading (``catalog.core.signals``).
2. :func:`fit_all` — integrated rate laws for every trial at once (``catalog.core.batch``).
3. :func:`trial_figures` — blank model, sites, TOF, TON, per-mass/per-area rates, enhancement, photon yield,
   transport numbers and hazard estimates per trial.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from catalog.analysis.settings import SET_POINT_TOLERANCE, TRIAL_FIT_COLUMNS
from catalog.core import arrhenius, batch, hazard, photons, sites, transport
from catalog.core.measurements import MEASUREMENTS, condition_arrays, to_amount
from catalog.core.stats import Z95

#: Trace points converted at a time (whole trials): the per-point temporaries of a block stay in cache and their
#: memory is reused, where campaign-sized ones cost a fresh page of memory per 4 kB (measured at 2×10^6 points:
#: 0.2 s for the first conversion in a process at once, 0.08 s in blocks).
AMOUNT_BLOCK_POINTS = 1 << 16


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
    # pd.factorize numbers trials in order of first appearance: the codes are sorted when each trial's points
    # come together, as the store returns them; points of interleaved trials are put together (stably) first.
    codes, uniques = pd.factorize(points["trial_id"], sort=False)
    value = points["value"].to_numpy(float)
    if (np.diff(codes) >= 0).all():
        return _amounts(trials.loc[uniques], codes, value)
    together = np.argsort(codes, kind="stable")
    amount = np.empty(len(codes))
    amount[together] = _amounts(trials.loc[uniques], codes[together], value[together])
    return amount


def _amounts(order: pd.DataFrame, codes: np.ndarray, value: np.ndarray) -> np.ndarray:
    """:func:`trace_amounts` on sorted integer trial codes; ``order`` holds the trial rows in code order.

    Trial conditions are gathered per point by code rather than by label, because a label lookup per point of a
    campaign-sized trace table dominates the whole analysis; and a block of whole trials at a time
    (:data:`AMOUNT_BLOCK_POINTS`). Every converter works element by element, so the blocks change no value.
    """
    counts = np.bincount(codes, minlength=len(order))
    ends = np.cumsum(counts)
    starts = ends - counts
    kinds = order["measurement"].to_numpy(object)
    present = [kind for kind in MEASUREMENTS if (kinds == kind).any()]
    kind_of = np.full(len(order), -1)
    for number, kind in enumerate(present):
        kind_of[kinds == kind] = number
    conditions = [condition_arrays(kind, order) for kind in present]
    amount = np.full(len(codes), np.nan)
    # Blocks end where a trial ends, the first after AMOUNT_BLOCK_POINTS (a longer trial is a block of its own).
    cuts = np.unique(np.searchsorted(ends, np.arange(AMOUNT_BLOCK_POINTS, len(codes), AMOUNT_BLOCK_POINTS)))
    for lo, hi in zip(np.r_[0, cuts + 1], np.r_[cuts + 1, len(order)], strict=True):
        if lo >= hi:
            continue
        p0, p1 = starts[lo], ends[hi - 1]
        code = codes[p0:p1]
        delta = value[p0:p1] - np.repeat(value[starts[lo:hi]], counts[lo:hi])
        kind_here = kind_of[code]
        for number, kind in enumerate(present):
            at = kind_here == number
            if not at.any():
                continue
            sub = code[at]
            # For mass_loss the converter takes the first reading of the array as zero; every trial's increments
            # start at 0, so a block's points of one kind go through in one call.
            amount[p0:p1][at] = to_amount(kind, delta[at],
                                          **{name: values[sub] for name, values in conditions[number].items()})
    return amount


def fit_all(trials: pd.DataFrame, points: pd.DataFrame) -> pd.DataFrame:
    """Fit every trial's trace at once; one row per trial (indexed by trial_id) with the kinetic fit columns."""
    codes, uniques = pd.factorize(points["trial_id"], sort=False)
    return fit_coded(trials.loc[uniques], codes, points["t"].to_numpy(float), points["value"].to_numpy(float))


def fit_coded(order: pd.DataFrame, codes: np.ndarray, t: np.ndarray, value: np.ndarray) -> pd.DataFrame:
    """:func:`fit_all` on integer trial codes (points sorted by code, then time); ``order`` holds the trial rows,
    indexed by trial_id, in code order."""
    n_max = (order["limiting_amount"] * order["product_ratio"]).to_numpy(float)
    fits = batch.fit_traces(codes, t, _amounts(order, codes, value), n_max)
    fits.index = pd.Index(order.index, name="trial_id")
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


def blank_detected(trials: pd.DataFrame, fits: pd.DataFrame) -> pd.Series:
    """Whether each blank trial's initial rate is above its noise: r0 > z_{0.975} se(r0) (indexed like the blanks).

    A blank at signal/noise of about 1 has a log rate biased by the noise (and a negative one cannot be logged at
    all), so only detected blanks enter the blank model; the others give upper limits (:func:`blank_limits`).
    """
    blanks = trials.index[trials["catalyst_id"].isna()].intersection(fits.index)
    f = fits.loc[blanks]
    return pd.Series((f["r0"] > Z95 * f["r0_se"]).to_numpy(bool), index=blanks)


def _per_charge(trials: pd.DataFrame, index) -> pd.Series:
    return trials.loc[index, "product_ratio"] * blank_charge(trials).loc[index]


def blank_model(trials: pd.DataFrame, fits: pd.DataFrame) -> arrhenius.ArrheniusFit | None:
    """Arrhenius fit of the detected blank trials' initial rates per unit charge, or None with fewer than two
    temperatures.

    .. math:: \\frac{r_{0,b}}{\\nu\\, n_{A,0}} = A_b\\, e^{-E_{a,b}/RT}

    Weighted by each blank's own standard error on the log scale, with the Birge ratio widening the covariance
    when the scatter exceeds those errors (:func:`catalog.core.linefit.fit_line`, ``scatter='birge'``): the
    blanks' precision spans orders of magnitude because their rates do, and an additive extra variance would flatten
    those weights and let the least precise blank pull the line.
    """
    detected = blank_detected(trials, fits)
    index = detected.index[detected.to_numpy()]
    if len(index) == 0:
        return None
    f = fits.loc[index]
    per = _per_charge(trials, index)
    try:
        return arrhenius.fit_arrhenius(trials.loc[index, "temperature"], f["r0"] / per, f["r0_se"] / per,
                                       scatter="birge")
    except (arrhenius.TooFewTemperatures, ValueError):
        return None


def blank_limits(trials: pd.DataFrame, fits: pd.DataFrame) -> pd.DataFrame:
    """Upper limits of the blanks not detected above noise: ``temperature`` (K) and ``upper`` (rate per charge,
    limiting-reactant basis, max(r0, 0) + z_{0.975} se), one row per such blank."""
    detected = blank_detected(trials, fits)
    index = detected.index[~detected.to_numpy()]
    f = fits.loc[index]
    per = _per_charge(trials, index) * 1.0
    upper = (np.maximum(f["r0"], 0.0) + Z95 * f["r0_se"]) / per
    return pd.DataFrame({"temperature": trials.loc[index, "temperature"].to_numpy(float),
                         "upper": upper.to_numpy(float)})


def blank_upper_at(limits: pd.DataFrame, T) -> np.ndarray:
    """Tightest upper limit on the blank rate per charge at each temperature T from undetected blanks at T or
    hotter (the blank rate rises with temperature, so a limit at a hotter set point bounds it at T); NaN where no
    undetected blank bounds it."""
    T = np.atleast_1d(np.asarray(T, dtype=float))
    if limits.empty:
        return np.full(T.shape, np.nan)
    hotter = limits["temperature"].to_numpy(float)[None, :] >= T[:, None] - SET_POINT_TOLERANCE
    upper = np.where(hotter, limits["upper"].to_numpy(float)[None, :], np.inf).min(axis=1)
    return np.where(np.isfinite(upper), upper, np.nan)


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
    # Where a blank at this temperature or hotter was not detected above noise, the blank rate here is known only
    # to lie below that blank's upper limit: the enhancement is then a lower bound, not a number.
    detected = blank_detected(trials, fits)
    out["blank_undetected"] = ~detected.reindex(out.index).fillna(True).to_numpy(bool)
    bound = blank_upper_at(blank_limits(trials, fits), T) * charge
    bounded = catalysed & np.isfinite(bound)
    out["enhancement_bound"] = bounded
    out.loc[bounded, "enhancement"] = np.nan
    out.loc[bounded, "enhancement_high"] = np.nan
    out.loc[bounded, "enhancement_low"] = (np.maximum(r0 - Z95 * r0_se, 0.0) / bound)[bounded]

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
    # Light-induced rate of product formation: the lit trial's r0 less the same catalyst's dark rate at the same set
    # point (which already holds the blank); without dark trials there, less the blank rate alone.
    dark = _dark_rate(out)
    ratio_p = out["product_ratio"].to_numpy(float)
    dark_product = np.where(np.isfinite(dark), dark * charge, blank_rate) * ratio_p
    out["quantum_yield"] = photons.apparent_quantum_yield(out["r0"].to_numpy(float), flux, dark_product)

    # Transport numbers for a suspended particle: the rate per particle volume against diffusion into (Weisz-Prater)
    # and film transport to (Mears) one particle.
    consumption = r0
    particle_volume = mass / out["particle_density"].to_numpy(float)
    radius = out["particle_size"].to_numpy(float) / 2
    c_bulk = reactant_concentration(out)
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


def _dark_rate(table: pd.DataFrame) -> np.ndarray:
    """Mean dark rate per charge (limiting-reactant basis) of the same catalyst at each trial's set point; NaN where
    the catalyst has no dark trial within SET_POINT_TOLERANCE."""
    lit = np.nan_to_num(table["light_power"].to_numpy(float)) > 0
    charge = blank_charge(table).to_numpy(float)
    per = table["rate"].to_numpy(float) / charge
    cat = table["catalyst_id"].astype(object).to_numpy()
    T = table["temperature"].to_numpy(float)
    out = np.full(len(table), np.nan)
    for i in np.flatnonzero(lit & table["catalyst_id"].notna().to_numpy()):
        same = ~lit & (cat == cat[i]) & (np.abs(T - T[i]) <= SET_POINT_TOLERANCE) & np.isfinite(per)
        if same.any():
            out[i] = per[same].mean()
    return out


def reactant_concentration(trials: pd.DataFrame) -> np.ndarray:
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
