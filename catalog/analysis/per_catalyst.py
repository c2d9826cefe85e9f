"""Per-catalyst figures: Arrhenius and Eyring fits, TOF and enhancement at the reference temperature, replicate
spread, reaction order and the loading-series inputs."""

from __future__ import annotations

import numpy as np
import pandas as pd

from catalog.analysis.per_trial import blank_charge, blank_upper_at, reactant_concentration
from catalog.analysis.settings import SET_POINT_TOLERANCE, Settings
from catalog.core import arrhenius, transport
from catalog.core.orders import reaction_order
from catalog.core.stats import Z95, t95


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


#: Trial columns the catalyst rows are built from, read once as float arrays.
_TRIAL_NUMBERS = ("temperature", "tof", "tof_se", "sites", "catalyst_mass", "ton", "enhancement", "weisz_prater",
                  "mears", "adiabatic_rise", "rate", "rate_se", "light_power", "limiting_amount")


def catalyst_figures(trial_table: pd.DataFrame, catalysts: pd.DataFrame, blank, settings: Settings,
                     blank_limits: pd.DataFrame | None = None) -> pd.DataFrame:
    """One row per catalyst: Arrhenius/Eyring on TOF, figures at the reference temperature, spreads and series.

    ``blank_limits`` (:func:`catalog.analysis.per_trial.blank_limits`) holds the upper limits of blanks not detected
    above noise; where one bounds the blank at T_ref the enhancement there is a lower bound
    (``enhancement_ref_bound``): ``enhancement_ref`` and its upper end are NaN and ``enhancement_ref_low`` is
    1 + TOF_low N / (upper limit x charge).
    """
    T_ref = settings.reference_temperature
    rows = []
    catalysed = trial_table[trial_table["catalyst_id"].notna()]
    blank_ea = blank.ea if blank is not None else np.nan
    charge = blank_charge(trial_table).loc[catalysed.index].to_numpy(float)
    if blank is not None:
        at_ref = arrhenius.predict(blank, T_ref)
        blank_ref = float(np.asarray(at_ref.value))
        blank_log_se = float(np.log(np.asarray(at_ref.high) / blank_ref)) / blank.coverage_factor
    bound = float(blank_upper_at(blank_limits, T_ref)[0]) if blank_limits is not None else np.nan
    area_of = catalysts["surface_area"].to_dict()
    # The columns are read once and each catalyst's trials taken by position: a pandas group per catalyst cost
    # ~6 ms in column look-ups alone (measured at 500 catalysts), more than its Arrhenius and Eyring fits.
    x = {name: catalysed[name].to_numpy(float) for name in _TRIAL_NUMBERS}
    concentration = reactant_concentration(catalysed)
    basis = catalysed["site_basis"].to_numpy(object)
    has_basis = catalysed["site_basis"].notna().to_numpy()
    model = catalysed["model"].to_numpy(object)
    has_model = catalysed["model"].notna().to_numpy()
    codes, ids = pd.factorize(catalysed["catalyst_id"], sort=True)
    by_catalyst = np.argsort(codes, kind="stable")  # each catalyst's trials together, in table order
    ends = np.cumsum(np.bincount(codes, minlength=len(ids)))
    for k, cid in enumerate(ids):
        at = by_catalyst[(ends[k - 1] if k else 0):ends[k]]
        g = {name: values[at] for name, values in x.items()}
        T = g["temperature"]
        lit = np.nan_to_num(g["light_power"]) > 0
        main = _standard(concentration[at], g["limiting_amount"], lit, T)
        row = {"catalyst_id": cid, "n_trials": len(at), "n_temperatures": len(np.unique(_set_points(T))),
               "n_arrhenius": int(main.sum()), "t_min": float(T.min()), "t_max": float(T.max()),
               "site_basis": "; ".join(sorted(set(basis[at][has_basis[at]]))),
               "models": "; ".join(f"{m} ×{n}" for m, n in _counts(model[at][has_model[at]]))}
        row |= _arrhenius_row(T[main], g["tof"][main], g["tof_se"][main], T_ref)
        row["delta_ea_blank"] = row["ea"] - blank_ea
        n_sites = float(np.nanmedian(g["sites"])) if (~np.isnan(g["sites"])).any() else np.nan
        mass = float(np.nanmedian(g["catalyst_mass"]))
        row["enhancement_ref_bound"] = bool(np.isfinite(bound) and np.isfinite(row["tof_ref"]))
        row["enhancement_ref_log_se"] = np.nan
        if row["enhancement_ref_bound"]:
            ref_charge = float(np.median(charge[at][main]))
            row |= {"enhancement_ref": np.nan, "enhancement_ref_high": np.nan, "blank_extrapolated": False,
                    "enhancement_ref_low": 1 + row["tof_ref_low"] * n_sites / (bound * ref_charge)}
        elif blank is not None and np.isfinite(row["tof_ref"]):
            # Enhancement at T_ref for the catalyst's median charge and sites: E = 1 + TOF·N / r_b(T_ref), with
            # var ln(E − 1) = var ln TOF + var ln r_b: the blank model's uncertainty often dominates.
            gain = row["tof_ref"] * n_sites / (blank_ref * float(np.median(charge[at][main])))
            row["enhancement_ref_log_se"] = float(np.hypot(row["tof_ref_log_se"], blank_log_se))
            spread = Z95 * row["enhancement_ref_log_se"]
            row["enhancement_ref"] = 1 + gain
            row["enhancement_ref_low"] = 1 + gain * np.exp(-spread)
            row["enhancement_ref_high"] = 1 + gain * np.exp(spread)
            row["blank_extrapolated"] = bool(np.asarray(at_ref.extrapolated))
        else:
            row |= {"enhancement_ref": np.nan, "enhancement_ref_low": np.nan, "enhancement_ref_high": np.nan,
                    "blank_extrapolated": False}
        rate_ref = row["tof_ref"] * n_sites
        row["rate_per_mass_ref"] = rate_ref / mass if np.isfinite(mass) else np.nan
        area = area_of.get(cid, np.nan)
        row["rate_per_area_ref"] = rate_ref / (mass * area) if np.isfinite(area) else np.nan
        row["ton_max"] = _nanmax(g["ton"])
        row["replicate_cv"] = replicate_cv(T[main], g["tof"][main])
        row |= _order_row(concentration[at], T, lit, g["rate"], g["rate_se"])
        row["median_sites"] = n_sites
        row["min_enhancement"] = (float(np.nanmin(g["enhancement"])) if (~np.isnan(g["enhancement"])).any()
                                  else np.nan)
        row["max_weisz_prater"] = _nanmax(g["weisz_prater"])
        # Trials assume first order (M is linear in the order n); the catalyst row uses the measured order when a
        # concentration series gave one, and the Weisz-Prater limit for that order.
        measured = abs(row["order"]) if np.isfinite(row["order"]) else 1.0
        row["max_mears"] = _nanmax(g["mears"]) * measured
        row["weisz_prater_limit"] = float(transport.weisz_prater_limit(row["order"]))
        row["max_adiabatic_rise"] = _nanmax(g["adiabatic_rise"])
        rows.append(row)
    out = pd.DataFrame(rows)
    if out.empty:
        return out
    out = out.set_index("catalyst_id")
    return out.join(catalysts[["metal", "support", "metal_loading", "dispersion", "price_per_gram", "description"]],
                    how="left")


def _counts(values: np.ndarray) -> list[tuple[object, int]]:
    """(value, count) pairs, most frequent first and ties in order of first appearance (as ``value_counts``)."""
    first: dict = {}
    for value in values:
        first[value] = first.get(value, 0) + 1
    return sorted(first.items(), key=lambda item: -item[1])


def standard_series(group: pd.DataFrame) -> np.ndarray:
    """Trials of one catalyst run at its standard charge: the Arrhenius and replicate set.

    TOF of a reaction that is not zero order depends on concentration, so trials of a concentration series would
    bend an Arrhenius plot; illuminated trials are kept apart for the same reason. A trial's charge is its initial
    concentration where known; a trial whose concentration is unknown (no liquid volume given) takes the
    concentration of the catalyst's trials with the same limiting amount, so one charge is one series whether or
    not every trial states its volume. The standard charge is the one measured at the most set points (then the one
    with the most trials); trials whose charge stays unknown count as one more group per limiting amount.
    """
    lit = np.nan_to_num(group["light_power"].to_numpy(float)) > 0
    return _standard(reactant_concentration(group), group["limiting_amount"].to_numpy(float), lit,
                     group["temperature"].to_numpy(float))


def _standard(c: np.ndarray, limiting_amount: np.ndarray, lit: np.ndarray, T: np.ndarray) -> np.ndarray:
    """:func:`standard_series` on one catalyst's arrays: concentration (changed here), limiting amount, lit, T."""
    amount = np.round(limiting_amount, 12)
    known = np.isfinite(c) & (c > 0)
    for i in np.flatnonzero(~known):
        same = known & (amount == amount[i])
        if same.any():
            c[i] = float(np.median(c[same]))
    level = np.where(np.isfinite(c) & (c > 0), np.round(np.log(np.where(c > 0, c, 1.0)), 3), np.inf)
    # Illuminated trials measure a different (photo-assisted) rate: they never join the dark series. The key text
    # is made once per distinct (light, level, amount), told apart by their bytes as the text tells them apart.
    rows = np.ascontiguousarray(np.stack([lit.astype(float), level, np.where(np.isfinite(level), 0.0, amount)], 1))
    distinct, first, inverse = np.unique(rows.view(np.dtype((np.void, rows.itemsize * 3))).ravel(),
                                         return_index=True, return_inverse=True)
    text = [f"{'lit' if lit[i] else 'dark'} {level[i]} {'' if np.isfinite(level[i]) else amount[i]}" for i in first]
    key = np.array(text)[inverse.ravel()] if len(first) else np.array([], dtype=str)
    labels = _set_points(T)
    best, best_score = None, (-1, -1)
    for value in np.unique(key):
        at = key == value
        score = (len(np.unique(labels[at])), int(at.sum()))
        if score > best_score:
            best, best_score = at, score
    return best


def _nanmax(values: np.ndarray) -> float:
    return float(np.nanmax(values)) if (~np.isnan(values)).any() else np.nan


_ARRHENIUS_EMPTY = dict.fromkeys(
    ["ea", "ea_se", "ea_low", "ea_high", "ln_a", "ln_a_low", "ln_a_high", "dh", "dh_low", "dh_high", "ds", "ds_low",
     "ds_high", "curvature_p", "birge", "r2_arrhenius", "tof_ref_log_se", "tof_ref_dof", "ea_dof"], np.nan)


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
            half = (t95(n - 1) if n > 1 else Z95) * sem
            row |= {"tof_ref": mean, "tof_ref_low": max(mean - half, 0.0), "tof_ref_high": mean + half,
                    "tof_ref_extrapolated": False, "tof_ref_log_se": sem / mean,
                    "tof_ref_dof": float(n - 1) if n > 1 else np.inf}
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
        # no residual dof: the stated errors are taken as known, so the normal quantile (infinite dof)
        "tof_ref_dof": float(fit.dof) if fit.dof > 0 else np.inf, "ea_dof": float(fit.dof) if fit.dof > 0 else np.inf,
    }
    return row


def _order_row(c: np.ndarray, T: np.ndarray, lit: np.ndarray, rate: np.ndarray, rate_se: np.ndarray) -> dict:
    """Reaction order from trials at one set point that differ in initial concentration (the largest such series),
    from one catalyst's arrays: concentration, temperature, lit, rate and its standard error."""
    empty = {"order": np.nan, "order_low": np.nan, "order_high": np.nan, "order_temperature": np.nan}
    labels = _set_points(T)
    dark = ~lit
    best = None
    for label in np.unique(labels):
        at = (labels == label) & np.isfinite(c) & (c > 0) & dark
        if len(np.unique(np.round(c[at], 9))) >= 3 and (best is None or at.sum() > best.sum()):
            best = at
    if best is None:
        return empty
    try:
        fit = reaction_order(c[best], rate[best], rate_se[best])
    except ValueError:
        return empty
    return {"order": fit.order, "order_low": fit.low, "order_high": fit.high,
            "order_temperature": float(np.mean(T[best]))}
