"""Seeded known-truth campaigns with built-in traps: the acceptance fixture for the rate, Ea and flag layer.

Invented data only (the chemistry of :mod:`catalog.datasets.synth`: first-order hydrogen release from ammonia
borane, blank and catalysed paths in parallel). Each campaign has ``n_catalysts`` catalysts with TOF_ref a factor
1.6 apart in seeded order and Ea from an even grid over 35-75 kJ/mol, five temperatures in triplicate, duplicate
blanks at every temperature, the four read-outs in rotation and 1.5 % replicate scatter. Four catalysts (seeded
choice) carry a trap, recorded in ``truth.problem``:

``deactivating``
    k_c = k_c,0 exp(-t/tau) with tau = 2 half-lives at 35 °C: the plateau stays near 75 % of the charge's yield.
``transport``
    500 um particles and an apparent Ea of 12 kJ/mol: the Weisz-Prater number exceeds its limit.
``induction``
    activity ramps up as 1 - exp(-t/lag) with lag = half a half-life: a sigmoidal start.
``leak``
    every trial is read on a gas burette that loses 15 % of the full yield from 70 % of the run to its end.

The clean catalysts carry realistic but harmless features: a third of their trials start reading at 10 % of the
run (first reading well after t = 0), and with ``minutes=True`` the trace file gives time in minutes.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.constants import zero_Celsius

from catalog.datasets import synth

__all__ = ["TRAPS", "known_truth_campaign"]

#: trap name -> the catalyst flag code that must report it
TRAPS = {"deactivating": "deactivation", "transport": "weisz-prater", "induction": "induction-period",
         "leak": "leak"}
#: Trial-to-trial (replicate) scatter of the rate, lognormal sd: careful weighing and charging. With 15 trials a
#: catalyst, TOF at 35 °C is then known to about 0.6 %, so the 2 % acceptance target sits beyond 3 standard errors.
_SCATTER = 0.015
_TRANSPORT_EA = 12e3
_TRANSPORT_PARTICLE_UM = 500.0
#: Clean catalysts are 2 um powders: at 65 °C the most active stays below a Weisz-Prater number of 0.1.
_CLEAN_PARTICLE_UM = 2.0


def known_truth_campaign(seed: int = 0, n_catalysts: int = 10, minutes: bool = False, n_points: int = 60,
                         temperatures_C=(25, 35, 45, 55, 65), replicates: int = 3) -> synth.Campaign:
    """A campaign with known kinetics and the traps of the module docstring.

    Parameters
    ----------
    seed : int
        Seed of the numpy random generator; the same seed gives identical frames.
    n_catalysts : int
        Catalysts (at least 5: four traps and one clean).
    minutes : bool
        Write trace times in minutes (header ``time [min]``) instead of seconds.
    n_points, temperatures_C, replicates
        Readings per trace, set temperatures (°C) and trials per catalyst and temperature.

    Returns
    -------
    catalog.datasets.synth.Campaign
        ``truth.problem`` names each catalyst's trap ('' when clean).
    """
    if n_catalysts < len(TRAPS) + 1:
        raise ValueError(f"n_catalysts must be at least {len(TRAPS) + 1}")
    rng = np.random.default_rng(seed)
    metals = ("Pt", "Ru", "Rh", "Pd", "Ir", "Ni")
    supports = ("C", "Al2O3", "TiO2", "SiO2", "CeO2")
    order = rng.permutation(n_catalysts)
    eas = rng.permutation(np.linspace(35e3, 75e3, n_catalysts))
    trap_of = dict(zip(rng.choice(n_catalysts, len(TRAPS), replace=False), TRAPS, strict=False))
    specs = []
    for i in range(n_catalysts):
        metal, support = metals[i % len(metals)], supports[i % len(supports)]
        tof = 0.2 * 1.6 ** order[i]
        loading = float(synth._round_to(10.0 * 0.05 ** (order[i] / max(n_catalysts - 1, 1)), 0.1))
        dispersion = float(30 + 10 * (i % 4))
        sites_per_mg = synth._sites([1.0], [metal], [loading], [dispersion], [np.nan])[0]
        mass = max(float(synth._round_to(np.log(2) / (8 * 60.0) * synth.C_STD * synth.V_STD
                                         / (tof * sites_per_mg), 0.1)), 0.5)
        problem = trap_of.get(i, "")
        half = np.log(2) * synth.C_STD * synth.V_STD / (tof * sites_per_mg * mass)  # s at 35 °C
        specs.append(dict(
            catalyst_id=f"Q{i + 1:02d}", metal=metal, support=support, loading=loading, dispersion=dispersion,
            ea=_TRANSPORT_EA if problem == "transport" else eas[i], tof_ref=tof, mass=mass, problem=problem,
            tau=2 * half if problem == "deactivating" else np.inf, lag=0.5 * half if problem == "induction" else 0.0,
            leak=0.15 if problem == "leak" else 0.0,
            particle=_TRANSPORT_PARTICLE_UM if problem == "transport" else _CLEAN_PARTICLE_UM))
    catalysts = synth._catalyst_frame(
        {"catalyst_id": s["catalyst_id"], "metal": s["metal"], "metal_loading [wt%]": s["loading"],
         "dispersion [%]": s["dispersion"], "surface_area [m^2/g]": 150.0, "support": s["support"],
         "description": f"known-truth fixture {s['catalyst_id']}", "batch": "Q", "price_per_gram": 10.0}
        for s in specs)
    truth = pd.DataFrame(
        [{"catalyst_id": s["catalyst_id"], "ea_J_per_mol": s["ea"], "tof_ref": s["tof_ref"], "t_ref_K": synth.T_REF_K,
          "k_blank_ref": np.nan, "tau_s": s["tau"], "order": 1.0, "problem": s["problem"]} for s in specs]
        + [{"catalyst_id": "blank", "ea_J_per_mol": synth.BLANK_EA, "tof_ref": np.nan, "t_ref_K": synth.T_REF_K,
            "k_blank_ref": synth.BLANK_K_REF, "tau_s": np.inf, "order": 1.0, "problem": "blank"}])
    spec_of = [s for s in specs + [{}] for _ in temperatures_C for _ in range(replicates if s else 2)]
    temp_c = np.array([float(t) for s in specs + [{}] for t in temperatures_C for _ in range(replicates if s else 2)])
    n = len(spec_of)
    catalysed = np.array([bool(s) for s in spec_of])
    get = lambda key, default: np.array([s.get(key, default) for s in spec_of])  # noqa: E731
    modes = np.array([synth._MODE_NAMES[i % 4] if catalysed[i] else "gas_volume" for i in range(n)])
    modes = np.where(get("leak", 0.0) > 0, "gas_volume", modes)
    cols, baseline = synth._instrument_columns(rng, modes, np.full(n, 1.0), np.full(n, 10.0))
    T = temp_c + zero_Celsius
    scatter = np.exp(_SCATTER * rng.normal(0.0, 1.0, n))
    tof_std = get("tof_ref", 0.0) * synth._arrhenius(T, get("ea", 0.0)) * scatter
    clean = catalysed & (get("problem", "") == "")
    late = clean & (rng.random(n) < 1 / 3)
    plan = pd.DataFrame({
        "trial_id": [f"Q{i + 1:04d}" for i in range(n)],
        "catalyst_id": pd.array([s.get("catalyst_id") for s in spec_of], dtype="str"),
        "temperature [degC]": temp_c,
        "catalyst_mass [mg]": np.where(catalysed, get("mass", np.nan), np.nan),
        **cols,
        "particle_size [um]": np.where(catalysed, get("particle", np.nan), np.nan),
        "light_wavelength [nm]": np.nan,
        "light_power [mW]": np.nan,
        "operator": synth._OPERATORS[1],
        "started_at": synth._started_at(rng, n),
        "notes": np.where(catalysed, None, "uncatalysed blank"),
        "effective_diffusivity [m^2/s]": np.where(catalysed, synth._EFFECTIVE_DIFFUSIVITY, np.nan),
        "particle_density [g/cm^3]": np.where(catalysed, synth._PARTICLE_DENSITY, np.nan),
        "reaction_enthalpy [kJ/mol]": np.nan,
        "heat_capacity [J/K]": np.nan,
        "_metal": [s.get("metal") for s in spec_of],
        "_loading": get("loading", np.nan),
        "_dispersion": get("dispersion", np.nan),
        "_site_density": np.nan,
        "_tof_std": tof_std,
        "_tau": get("tau", np.inf),
        "_lag": get("lag", 0.0),
        "_leak": get("leak", 0.0),
        "_t_first": np.where(late, 0.1, 0.0),
        "_photo": 1.0,
        "_baseline": baseline,
        "_points": n_points,
    })
    _, k_blank, k_cat0 = synth._rate_constants(plan)
    plan["_duration"] = np.where(catalysed, synth._round_to(4.5 * np.log(2) / (k_blank + k_cat0) + 3 * plan["_lag"],
                                                            1.0), synth.BLANK_DURATION)
    campaign = synth._assemble(plan, catalysts, truth, rng, 1.0)
    if minutes:
        traces = campaign.traces.rename(columns={"time [s]": "time [min]"})
        traces["time [min]"] = traces["time [min]"] / 60.0
        campaign = synth.Campaign(campaign.catalysts, campaign.trials, traces, campaign.truth, campaign.trial_truth)
    return campaign
