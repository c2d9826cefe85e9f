"""The demo campaign: an invented screening of supported metals for hydrogen release from ammonia borane.

Invented data for the demo and the app's embedded default database; every built-in problem (deactivation,
transport limit, poor replicates, single temperature...) is there to be caught by the diagnostics.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.constants import zero_Celsius

from catalog.datasets.synth import (
    BLANK_DURATION,
    BLANK_EA,
    BLANK_K_REF,
    C_STD,
    CLEAN_PARTICLE_UM,
    EFFECTIVE_DIFFUSIVITY,
    HYDROLYSIS_ENTHALPY,
    OPERATORS,
    PARTICLE_DENSITY,
    T_REF_K,
    V_STD,
    Campaign,
    arrhenius,
    assemble,
    catalyst_frame,
    instrument_columns,
    rate_constants,
    round_to,
    site_amounts,
    started_at,
)

# Demo catalysts: v1 columns, plus ea (kJ/mol), half-life (min) at 35 °C with the nominal mass and standard charge
# (or ``tof_of``: share another catalyst's TOF), nominal mass (mg), particle size (um) and the built-in problem.
# Prices are in the team's currency per gram.
_DEMO_CATALYSTS = (
    dict(catalyst_id="PtC-01", metal="Pt", loading=5.0, dispersion=40.0, area=850.0, support="C", price=62.0,
         description="Pt on activated carbon, incipient wetness", batch="B24-031", ea=52.0, half=6.0, mass=10.0),
    dict(catalyst_id="RuC-02", metal="Ru", loading=5.0, dispersion=30.0, area=900.0, support="C", price=24.0,
         description="Ru on carbon black, reduced 300 C", batch="B24-034", ea=47.0, half=8.0, mass=10.0),
    dict(catalyst_id="RhAl-03", metal="Rh", loading=5.0, dispersion=35.0, area=180.0, support="Al2O3", price=95.0,
         description="Rh on gamma-alumina", batch="B24-040", ea=56.0, half=7.0, mass=10.0,
         problem="single_temperature"),
    dict(catalyst_id="RuAl-04", metal="Ru", loading=2.0, dispersion=25.0, area=160.0, support="Al2O3", price=11.0,
         description="Ru on alumina pellets, crushed and sieved 450-550 um", batch="B24-041", ea=12.0, half=10.0,
         mass=25.0, particle=500.0, problem="transport"),
    dict(catalyst_id="PdAl-05", metal="Pd", loading=1.0, dispersion=25.0, area=190.0, support="Al2O3", price=7.5,
         description="Pd on gamma-alumina, loading series", batch="B24-050", ea=62.0, half=25.0, mass=20.0),
    dict(catalyst_id="PdAl-06", metal="Pd", loading=2.0, dispersion=25.0, area=188.0, support="Al2O3", price=13.0,
         description="Pd on gamma-alumina, loading series", batch="B24-051", ea=62.0, tof_of="PdAl-05", mass=20.0),
    dict(catalyst_id="PdAl-07", metal="Pd", loading=5.0, dispersion=25.0, area=181.0, support="Al2O3", price=29.0,
         description="Pd on gamma-alumina, loading series", batch="B24-052", ea=62.0, tof_of="PdAl-05", mass=20.0),
    dict(catalyst_id="CoSi-08", metal="Co", loading=10.0, site_density=35.0, area=290.0, support="SiO2", price=1.6,
         description="Co on silica, sites by H2 chemisorption", batch="B24-060", ea=45.0, half=6.0, mass=20.0,
         tau=300.0, problem="deactivating"),
    dict(catalyst_id="NiCe-09", metal="Ni", loading=10.0, site_density=20.0, area=95.0, support="CeO2", price=1.3,
         description="Ni on ceria, sites by H2 chemisorption", batch="B24-061", ea=58.0, half=14.0, mass=20.0,
         problem="poor_replicates"),
    dict(catalyst_id="PtTi-10", metal="Pt", loading=1.0, dispersion=60.0, area=55.0, support="TiO2", price=16.0,
         description="Pt on anatase titania, photodeposited", batch="B24-070", ea=50.0, half=9.0, mass=20.0),
    dict(catalyst_id="NiSi-11", metal="Ni", loading=5.0, dispersion=8.0, area=300.0, support="SiO2", price=0.9,
         description="Ni on silica, low dispersion", batch="B24-071", ea=68.0, half=45.0, mass=20.0),
    dict(catalyst_id="PtCe-12", metal="Pt", loading=2.0, dispersion=55.0, area=110.0, support="CeO2", price=30.0,
         description="Pt on ceria", batch="B24-072", ea=40.0, half=7.0, mass=10.0),
)
DEMO_TEMPERATURES = (25.0, 35.0, 45.0, 55.0)
_CATALYSED_CAP = 40 * 60.0  # s: bench time per catalysed trial, so the slowest runs stop part-way
_PHOTO_GAIN = 1.8  # invented rate gain under 365 nm light on the titania catalyst
_REPLICATE_SCATTER = {"": 0.04, "poor_replicates": 0.30}  # lognormal sd of the rate between replicates


def _tof_from_half_life(half_min, mass_mg, metal, loading, dispersion, site_density):
    """TOF at c_std that gives the requested half-life for the standard charge (first order, blank neglected).

    .. math:: \\mathrm{TOF}_\\mathrm{ref} = \\frac{\\ln 2}{t_{1/2}}\\,\\frac{c_\\mathrm{std} V_\\mathrm{std}}{N}
    """
    sites = site_amounts([mass_mg], [metal], [loading], [dispersion], [site_density])[0]
    return np.log(2) / (half_min * 60.0) * C_STD * V_STD / sites


def demo_campaign(seed: int = 2026) -> Campaign:
    """The invented demo campaign: ammonia borane hydrolysis over twelve supported metal catalysts.

    Twelve catalysts (Pt, Ru, Rh, Pd, Co, Ni on C, Al2O3, TiO2, SiO2, CeO2) at 25, 35, 45 and 55 °C in duplicate,
    duplicate blanks at every temperature, all four measurement modes, and these built-in problems:

    * ``CoSi-08`` deactivates (k_c = k_c,0 e^{-t/τ}, τ = 300 s): its plateau stays short of stoichiometric;
    * ``RuAl-04`` is transport-limited: apparent Ea 12 kJ/mol on 500 um particles (diffusivity and particle
      density given, so a Weisz-Prater check fires; clean catalysts are 5 um powders);
    * ``RhAl-03`` was measured at 35 °C only;
    * ``NiCe-09`` has poor replicates (30 % lognormal scatter in rate);
    * ``PdAl-05/06/07`` is a loading series (1, 2, 5 wt%) at constant dispersion and TOF, so rate ∝ sites;
    * ``RuC-02`` has a concentration series at 35 °C (0.05-0.4 mol/L, first order);
    * ``PtTi-10`` has two illuminated trials (365 nm, 50 mW) with a 1.8-fold rate gain;
    * ``NiSi-11`` is slow: at 25 °C it reaches only part conversion in the 40 min bench time.

    Parameters
    ----------
    seed : int, default 2026
        Seed of the numpy random generator; the same seed gives identical frames.

    Returns
    -------
    Campaign
    """
    rng = np.random.default_rng(seed)
    specs = []
    for spec in _DEMO_CATALYSTS:
        spec = {"problem": "", "tau": np.inf, "particle": CLEAN_PARTICLE_UM, "dispersion": np.nan,
                "site_density": np.nan, **spec}
        if "tof_of" in spec:  # a loading series shares one TOF, so its rates scale with the site count
            spec["tof_ref"] = next(s["tof_ref"] for s in specs if s["catalyst_id"] == spec["tof_of"])
        else:
            spec["tof_ref"] = _tof_from_half_life(spec["half"], spec["mass"], spec["metal"], spec["loading"],
                                                  spec["dispersion"], spec["site_density"])
        specs.append(spec)
    catalysts = catalyst_frame(
        {"catalyst_id": s["catalyst_id"], "metal": s["metal"], "metal_loading [wt%]": s["loading"],
         "dispersion [%]": s["dispersion"], "site_density [umol/g]": s["site_density"],
         "surface_area [m^2/g]": s["area"], "description": s["description"], "support": s["support"],
         "batch": s["batch"], "price_per_gram": s["price"]}
        for s in specs
    )
    truth = pd.DataFrame(
        [{"catalyst_id": s["catalyst_id"], "ea_J_per_mol": s["ea"] * 1e3, "tof_ref": s["tof_ref"],
          "t_ref_K": T_REF_K, "k_blank_ref": np.nan, "tau_s": s["tau"], "order": 1.0, "problem": s["problem"]}
         for s in specs]
        + [{"catalyst_id": "blank", "ea_J_per_mol": BLANK_EA, "tof_ref": np.nan, "t_ref_K": T_REF_K,
            "k_blank_ref": BLANK_K_REF, "tau_s": np.inf, "order": 1.0, "problem": "blank"}]
    )

    # One row per trial: (spec or None, set temperature °C, c0 mol/L, liquid mL, light?, note)
    rows = []
    for spec in specs:
        temps = (35.0,) if spec["problem"] == "single_temperature" else DEMO_TEMPERATURES
        rows += [(spec, temp, 0.1, 10.0, False, "") for temp in temps for _ in range(2)]
    by_id = {s["catalyst_id"]: s for s in specs}
    rows += [(by_id["RuC-02"], 35.0, c0, 5.0, False, "concentration series") for c0 in (0.05, 0.1, 0.2, 0.4)]
    rows += [(by_id["PtTi-10"], 25.0, 0.1, 10.0, True, "illuminated from below, 365 nm LED") for _ in range(2)]
    rows += [(None, temp, 0.1, 10.0, False, "uncatalysed blank") for temp in DEMO_TEMPERATURES for _ in range(2)]
    rows = [rows[i] for i in rng.permutation(len(rows))]  # bench order is mixed, not catalyst by catalyst
    n = len(rows)

    # Modes cycle so every catalyst sees several; blanks stay on the burette, the most sensitive read-out.
    # The concentration series stays on the burette too, so its order fit compares like with like.
    cycle = ("gas_volume", "mass_loss", "gas_volume", "pressure", "gas_volume", "concentration")
    on_burette = np.array([r[0] is None or r[5] == "concentration series" for r in rows])
    modes = np.where(on_burette, "gas_volume", np.array([cycle[i % len(cycle)] for i in range(len(rows))]))
    liquid = np.array([r[3] for r in rows])
    n_lim = round_to(np.array([r[2] for r in rows]) * liquid, 1e-4)  # mol/L × mL = mmol
    cols, baseline = instrument_columns(rng, modes, n_lim, liquid)

    catalysed = np.array([r[0] is not None for r in rows])
    spec_of = [r[0] or {} for r in rows]
    mass = np.where(catalysed, round_to([s.get("mass", 0.0) + rng.uniform(-0.5, 0.5) for s in spec_of], 0.1),
                    np.nan)
    temp_c = round_to(np.array([r[1] for r in rows]) + rng.normal(0.0, 0.1, n), 0.1)
    T = temp_c + zero_Celsius
    problem = np.array([s.get("problem", "") for s in spec_of])
    scatter = np.exp(rng.normal(0.0, 1.0, n) * np.array([_REPLICATE_SCATTER.get(p, 0.04) for p in problem]))
    photo = np.array([_PHOTO_GAIN if r[4] else 1.0 for r in rows])
    tof_std = np.array([s.get("tof_ref", 0.0) for s in spec_of]) * arrhenius(
        T, np.array([s.get("ea", 0.0) for s in spec_of]) * 1e3) * scatter * photo
    tau = np.array([s.get("tau", np.inf) for s in spec_of])
    particle = np.where(catalysed, [s.get("particle", np.nan) for s in spec_of], np.nan)

    plan = pd.DataFrame({
        "trial_id": [f"T{i + 1:04d}" for i in range(n)],
        "catalyst_id": pd.array([s.get("catalyst_id") for s in spec_of], dtype="str"),
        "temperature [degC]": temp_c,
        "catalyst_mass [mg]": mass,
        **cols,
        "particle_size [um]": particle,
        "light_wavelength [nm]": np.where(photo > 1, 365.0, np.nan),
        "light_power [mW]": np.where(photo > 1, 50.0, np.nan),
        "operator": rng.choice(OPERATORS, n),
        "started_at": started_at(rng, n),
        "notes": [r[5] or None for r in rows],
        "effective_diffusivity [m^2/s]": np.where(catalysed, EFFECTIVE_DIFFUSIVITY, np.nan),
        "particle_density [g/cm^3]": np.where(catalysed, PARTICLE_DENSITY, np.nan),
        # A heat balance is recorded on the sealed-reactor trials, where an exotherm matters most.
        "reaction_enthalpy [kJ/mol]": np.where(modes == "pressure", HYDROLYSIS_ENTHALPY, np.nan),
        "heat_capacity [J/K]": np.where(modes == "pressure", 35.0, np.nan),
        "_metal": [s.get("metal") for s in spec_of],
        "_loading": [s.get("loading", np.nan) for s in spec_of],
        "_dispersion": [s.get("dispersion", np.nan) for s in spec_of],
        "_site_density": [s.get("site_density", np.nan) for s in spec_of],
        "_tof_std": tof_std,
        "_tau": tau,
        "_photo": photo,
        "_baseline": baseline,
    })
    _, k_blank, k_cat0 = rate_constants(plan)
    k_obs = k_blank + k_cat0
    # About 4.5 half-lives (or 4 deactivation times), capped at the bench time; blanks run long.
    span = np.where(np.isfinite(tau), np.minimum(4.5 * np.log(2) / k_obs, 4 * tau), 4.5 * np.log(2) / k_obs)
    plan["_duration"] = np.where(catalysed, round_to(np.minimum(span, _CATALYSED_CAP), 10.0), BLANK_DURATION)
    # Logged instruments sample densely; burette and analyser readings are taken by hand.
    plan["_points"] = np.where(np.isin(modes, ("mass_loss", "pressure")), rng.integers(110, 151, n),
                               rng.integers(40, 71, n))
    return assemble(plan, catalysts, truth, rng, 1.0)
