"""Seeded synthetic screening campaigns with known kinetics: the demo data set and the recovery-test fixtures.

The invented chemistry is hydrogen release by hydrolysis of ammonia borane over supported metal catalysts,

    NH3BH3 + 2 H2O -> NH4BO2 + 3 H2,

with ammonia borane as the limiting reactant (``product_ratio`` 3 when hydrogen is measured, 1 when the analyser
reads borate). Everything here is made up for demonstration and for checking that the analysis recovers what was put
in; none of it is measured data.

Kinetic truth
-------------
The uncatalysed (blank) path and the catalysed path run in parallel, both first order in the limiting reactant A:

.. math::
    -\\frac{dn_A}{dt} = \\left(k_b(T) + k_c(T, t)\\right) n_A, \\qquad
    k_c = \\frac{\\mathrm{TOF}_\\mathrm{std}(T)\\,N}{c_\\mathrm{std}\\,V_L}\\,e^{-t/\\tau}

    k_b(T) = k_{b,\\mathrm{ref}}\\,e^{-\\frac{E_{a,b}}{R}\\left(\\frac1T - \\frac1{T_\\mathrm{ref}}\\right)}, \\qquad
    \\mathrm{TOF}_\\mathrm{std}(T) = \\mathrm{TOF}_\\mathrm{ref}\\,
        e^{-\\frac{E_a}{R}\\left(\\frac1T - \\frac1{T_\\mathrm{ref}}\\right)}

where N is the amount of active sites (mol), V_L the liquid volume, c_std = 0.1 mol/L the campaign's standard
initial concentration and τ the deactivation time constant (infinite for a stable catalyst). Integrating,

.. math::
    P(t) = \\nu\\,n_{A,0}\\left[1 - \\exp\\left(-k_b t - k_{c,0}\\,\\tau\\,(1 - e^{-t/\\tau})\\right)\\right]
    \\;\\xrightarrow{\\tau\\to\\infty}\\; \\nu\\,n_{A,0}\\left[1 - e^{-(k_b + k_{c,0})t}\\right]

so a stable catalyst changes how fast the plateau ν n_A,0 is reached, not the plateau itself. The initial product
rate is r0 = dP/dt(0) = ν n_A,0 (k_b + k_c,0) and the true turnover frequency, in turnovers of the limiting reactant
per site per second, is

.. math:: \\mathrm{TOF} = \\frac{r_0 - r_{0,b}}{\\nu\\,N} = \\frac{k_{c,0}\\,n_{A,0}}{N},

which equals TOF_std(T) at c_std (first order: it scales with c0 / c_std in a concentration series).

Sites: N = m_cat w D / M_metal from loading w and dispersion D, or N = m_cat ρ_s when a measured site density ρ_s is
given (it overrides the metal count, as in the v1 campaign contract).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv
from scipy.constants import R, zero_Celsius

from catalog.core.signals import molar_mass, water_vapour_pressure

__all__ = [
    "CATALYST_HEADERS",
    "TRACE_HEADERS",
    "TRIAL_HEADERS",
    "Campaign",
    "demo_campaign",
    "known_kinetics_campaign",
    "write_bulk_campaign",
    "write_campaign",
]

#: v1 campaign headers, in file order (units in square brackets).
CATALYST_HEADERS = (
    "catalyst_id",
    "metal",
    "metal_loading [wt%]",
    "dispersion [%]",
    "site_density [umol/g]",
    "surface_area [m^2/g]",
    "description",
    "support",
    "batch",
    "price_per_gram",
)
TRIAL_HEADERS = (
    "trial_id",
    "catalyst_id",
    "temperature [degC]",
    "measurement",
    "signal_unit",
    "catalyst_mass [mg]",
    "limiting_amount [mmol]",
    "product_ratio",
    "gas_pressure [kPa]",
    "gas_temperature [degC]",
    "gas_molar_mass [g/mol]",
    "headspace_volume [mL]",
    "liquid_volume [mL]",
    "initial_concentration [mol/L]",
    "particle_size [um]",
    "light_wavelength [nm]",
    "light_power [mW]",
    "operator",
    "started_at",
    "notes",
    "collected_over_water",
    "effective_diffusivity [m^2/s]",
    "particle_density [g/cm^3]",
    "reaction_enthalpy [kJ/mol]",
    "heat_capacity [J/K]",
)
TRACE_HEADERS = ("trial_id", "time [s]", "value")

T_REF_K = zero_Celsius + 35.0  # middle of the demo temperature range, so ln TOF_ref is well determined
C_STD = 100.0  # mol/m³ (0.1 mol/L): the campaign's standard initial concentration of ammonia borane
V_STD = 10e-6  # m³ (10 mL): standard liquid volume
BLANK_EA = 100e3  # J/mol, invented: slow uncatalysed hydrolysis needs a high barrier to stay a small correction
BLANK_K_REF = 5e-6  # 1/s at T_REF_K, invented: about 2 % conversion in 4 h at 25 °C, half in 4 h at 55 °C
BLANK_DURATION = 4 * 3600.0  # s: long enough to read a slope from the slow blank
# Standard enthalpy of ammonia borane hydrolysis, about -156 kJ/mol (from memory; demo value only).
HYDROLYSIS_ENTHALPY = -156.0  # kJ/mol of limiting reactant
M_H2 = molar_mass("H2")  # kg/mol, IUPAC atomic weights via periodictable

# measurement -> (signal unit, noise sd in that unit, relative noise, reading resolution). Invented instrument
# figures in the usual range: burette read to ±0.05 mL, analytical balance 0.1 mg, pressure transducer 20 Pa,
# analyser 0.3 mmol/L plus 1 % of reading.
_MODES = {
    "gas_volume": ("mL", 0.05, 0.0, 0.01),
    "mass_loss": ("g", 1e-4, 0.0, 1e-4),
    "pressure": ("kPa", 0.02, 0.0, 1e-3),
    "concentration": ("mmol/L", 0.3, 0.01, 1e-2),
}
_MODE_NAMES = tuple(_MODES)
_OPERATORS = ("I. Brandt", "K. Osei", "P. Mori", "V. Lund")


@dataclass(frozen=True)
class Campaign:
    """A synthetic campaign: the three v1 tables plus the truth they were generated from.

    Attributes
    ----------
    catalysts, trials, traces : pandas.DataFrame
        The v1 tables, columns exactly :data:`CATALYST_HEADERS`, :data:`TRIAL_HEADERS`, :data:`TRACE_HEADERS`
        (numbers in the header units, NaN / missing = empty cell).
    truth : pandas.DataFrame
        One row per catalyst plus ``'blank'``: ``catalyst_id``, ``ea_J_per_mol`` (intrinsic, or apparent for the
        transport-limited catalyst), ``tof_ref`` (1/s, limiting-reactant turnovers per site at ``t_ref_K`` and
        c_std = 0.1 mol/L; NaN for the blank), ``t_ref_K``, ``k_blank_ref`` (1/s, blank row only),
        ``tau_s`` (deactivation time constant, inf when stable), ``order`` (1.0), ``problem`` (``''``,
        ``'deactivating'``, ``'transport'``, ``'single_temperature'``, ``'poor_replicates'``, ``'blank'``).
    trial_truth : pandas.DataFrame
        One row per trial: ``trial_id``, ``catalyst_id`` (``''`` for blanks), ``temperature_K``, ``measurement``,
        ``product_ratio``, ``sites_mol``, ``k_obs0`` (1/s, k_b + k_c,0), ``r0_true`` (mol product/s, dP/dt at 0),
        ``r0_blank_true`` (mol product/s), ``tof_true`` (1/s, (r0 - r0_blank)/(ν N), turnovers of the limiting
        reactant), ``tof_product_true`` (1/s, (r0 - r0_blank)/N), ``plateau_true`` (mol product as t → ∞, the
        blank path left out for a deactivating catalyst), ``photo_factor`` (rate gain under light, 1 in the dark).
    """

    catalysts: pd.DataFrame
    trials: pd.DataFrame
    traces: pd.DataFrame
    truth: pd.DataFrame
    trial_truth: pd.DataFrame


def _arrhenius(T, ea, t_ref=T_REF_K):
    """Arrhenius factor relative to the reference temperature.

    .. math:: f = \\exp\\left[-\\frac{E_a}{R}\\left(\\frac1T - \\frac1{T_\\mathrm{ref}}\\right)\\right]
    """
    return np.exp(-np.asarray(ea, dtype=float) / R * (1.0 / np.asarray(T, dtype=float) - 1.0 / t_ref))


def _sites(mass_mg, metal, loading_wt_pct, dispersion_pct, site_density_umol_g):
    """Moles of active sites from the recorded columns (the same numbers the importer reads).

    .. math:: N = m\\,\\rho_s \\;\\text{if } \\rho_s \\text{ given, else } N = \\frac{m\\,w\\,D}{M_\\mathrm{metal}}

    Parameters are in the CSV units (mg, element symbol, wt%, %, umol/g); returns mol.
    """
    mass_kg = np.asarray(mass_mg, dtype=float) * 1e-6
    density = np.asarray(site_density_umol_g, dtype=float) * 1e-3  # umol/g -> mol/kg
    # Parse each distinct symbol once: the formula parser is slow and bulk campaigns repeat a handful of metals.
    symbols, which = np.unique(np.asarray(metal, dtype=str), return_inverse=True)
    metal_molar = np.array([molar_mass(m) for m in symbols])[which]
    from_metal = mass_kg * np.asarray(loading_wt_pct, dtype=float) / 100 * np.asarray(dispersion_pct) / 100
    return np.where(np.isfinite(density), mass_kg * density, from_metal / metal_molar)


def _converted(t, k_blank, k_cat0, tau):
    """Fraction of the limiting reactant converted by time t.

    .. math:: X(t) = 1 - \\exp\\left[-k_b t - k_{c,0}\\,\\tau\\,(1 - e^{-t/\\tau})\\right],
        \\quad \\tau\\to\\infty:\\; k_{c,0}\\,\\tau\\,(1 - e^{-t/\\tau}) \\to k_{c,0}\\,t
    """
    finite = np.isfinite(tau)
    tau_safe = np.where(finite, tau, 1.0)
    catalysed = k_cat0 * np.where(finite, -tau_safe * np.expm1(-t / tau_safe), t)
    return -np.expm1(-k_blank * t - catalysed)


def _signal(mode, n, baseline, temperature_K, gas_pressure_kPa, gas_temperature_C, over_water, headspace_mL,
            liquid_mL):
    """Noise-free instrument reading (in the mode's signal unit) for n mol of product; arrays broadcast per point.

    .. math::
        V = V_0 + \\frac{n R T_g}{p_g - [\\text{over water}]\\,p_w(T_g)}, \\quad
        m = m_0 - n M_{H_2}, \\quad
        p = p_0 + \\frac{n R T}{V_h}, \\quad
        c = c_0 + \\frac{n}{V_L}

    ``baseline`` is V_0 (mL, burette dead volume), m_0 (g, tare plus contents), p_0 (kPa, absolute fill pressure) or
    c_0 (mmol/L, analyser offset) by mode. ``mode`` holds indices into the measurement list.
    """
    gas_T, wet = np.broadcast_arrays(np.asarray(gas_temperature_C, dtype=float) + zero_Celsius,
                                     np.asarray(over_water, dtype=bool))
    # Evaluate the vapour equation only where the gas really sat over water (other rows may hold NaN).
    p_w = np.zeros_like(gas_T)
    p_w[wet] = water_vapour_pressure(gas_T[wet])
    dry_pressure = np.asarray(gas_pressure_kPa, dtype=float) * 1e3 - p_w
    volume_mL = baseline + n * R * gas_T / dry_pressure * 1e6
    mass_g = baseline - n * M_H2 * 1e3
    pressure_kPa = baseline + n * R * temperature_K / (np.asarray(headspace_mL, dtype=float) * 1e-6) * 1e-3
    conc_mM = baseline + n / (np.asarray(liquid_mL, dtype=float) * 1e-6)  # mol/m³ is numerically mmol/L
    return np.choose(mode, (volume_mL, mass_g, pressure_kPa, conc_mM))


def _noisy(rng, mode, clean, noise):
    """Add Gaussian instrument noise and round to the reading resolution of each mode.

    .. math:: y = \\mathrm{round}\\left(y_0 + \\varepsilon,\\ \\delta\\right), \\quad
        \\varepsilon \\sim \\mathcal N\\left(0, \\left[s\\,(\\sigma_a + \\sigma_r |y_0|)\\right]^2\\right)

    The relative part uses the reading itself; only the analyser has one, and its baseline is small.
    """
    _, absolute, relative, resolution = (np.array(c) for c in zip(*_MODES.values(), strict=False))
    sd = noise * (absolute[mode] + relative[mode] * np.abs(clean))
    noisy = clean + sd * rng.standard_normal(clean.shape)
    step = resolution[mode]
    # Dividing by the whole number 1/step (not multiplying by step) gives the double nearest the decimal reading,
    # so the CSV shows 31.31 rather than 31.310000000000002.
    per_unit = np.round(1.0 / step)
    counts = np.round(noisy / step)
    return np.where(per_unit >= 1, counts / np.maximum(per_unit, 1), counts * step)


def _round_to(values, step):
    """Round to a multiple of ``step``, then to the digits ``step`` implies so the CSV carries no float residue."""
    digits = max(0, int(-np.floor(np.log10(step))))
    return np.round(np.round(np.asarray(values, dtype=float) / step) * step, digits)


def _rate_constants(plan):
    """Sites and first-order rate constants of each planned trial.

    .. math:: k_b = k_{b,\\mathrm{ref}}\\,f_\\mathrm{Arr}(T; E_{a,b}), \\qquad
        k_{c,0} = \\frac{\\mathrm{TOF}_\\mathrm{std}(T)\\,N}{c_\\mathrm{std}\\,V_L}

    Returns
    -------
    tuple of ndarray
        Sites N (mol, 0 for blanks), k_b (1/s), k_c,0 (1/s, 0 for blanks).
    """
    T = plan["temperature [degC]"].to_numpy(float) + zero_Celsius
    blank = plan["catalyst_id"].isna().to_numpy()
    sites = np.where(blank, 0.0, _sites(plan["catalyst_mass [mg]"].fillna(0.0), plan["_metal"].fillna("H"),
                                        plan["_loading"], plan["_dispersion"], plan["_site_density"]))
    liquid = plan["liquid_volume [mL]"].to_numpy(float) * 1e-6
    k_cat0 = np.where(blank, 0.0, plan["_tof_std"].to_numpy(float) * sites / (C_STD * liquid))
    return sites, BLANK_K_REF * _arrhenius(T, BLANK_EA), k_cat0


def _assemble(plan, catalysts, truth, rng, noise):
    """Generate traces and per-trial truth from a trial plan and wrap everything as a :class:`Campaign`.

    ``plan`` holds the v1 trial columns (CSV units) plus private kinetic columns: ``_metal``, ``_loading``,
    ``_dispersion``, ``_site_density`` (catalyst columns joined), ``_tof_std`` (1/s at the trial temperature and
    c_std, including replicate scatter and light gain), ``_tau`` (s), ``_photo``, ``_duration`` (s), ``_points``,
    ``_baseline`` (signal unit); optionally ``_t_first`` (first reading as a fraction of the duration), ``_lag``
    (s, induction time constant) and ``_leak`` (fraction of the full yield lost by the end).
    """
    T = plan["temperature [degC]"].to_numpy(float) + zero_Celsius
    blank = plan["catalyst_id"].isna().to_numpy()
    sites, k_blank, k_cat0 = _rate_constants(plan)
    n_lim = plan["limiting_amount [mmol]"].to_numpy(float) * 1e-3
    ratio = plan["product_ratio"].to_numpy(float)
    liquid = plan["liquid_volume [mL]"].to_numpy(float) * 1e-6
    tau = plan["_tau"].to_numpy(float)

    points = plan["_points"].to_numpy(int)
    index = np.repeat(np.arange(len(plan)), points)
    # Evenly spaced readings from the first reading (0 unless the plan says later) to the trial's duration, logged
    # to 0.1 s.
    first = _optional(plan, "_t_first", 0.0)
    fraction = np.concatenate([np.linspace(f, 1.0, p) for f, p in zip(first, points, strict=False)])
    duration = plan["_duration"].to_numpy(float)
    t = _round_to(fraction * duration[index], 0.1)
    # An induction period: activity ramps up as 1 - exp(-t/lag), so the kinetics run on the warped clock
    # t - lag (1 - exp(-t/lag)).
    lag = _optional(plan, "_lag", 0.0)[index]
    lag_safe = np.where(lag > 0, lag, 1.0)
    t_kin = np.where(lag > 0, t + lag_safe * np.expm1(-t / lag_safe), t)
    n = ratio[index] * n_lim[index] * _converted(t_kin, k_blank[index], k_cat0[index], tau[index])
    # A leak: from 70 % of the duration on, the collected product falls linearly by the given fraction of the
    # charge's full yield by the end (the chemistry is unchanged; the vessel loses gas).
    leak = _optional(plan, "_leak", 0.0)[index]
    start = 0.7 * duration[index]
    n = n - leak * ratio[index] * n_lim[index] * np.clip((t - start) / (duration[index] - start), 0.0, 1.0)
    mode = plan["measurement"].map({m: i for i, m in enumerate(_MODE_NAMES)}).to_numpy(int)[index]
    clean = _signal(
        mode, n, plan["_baseline"].to_numpy(float)[index], T[index],
        plan["gas_pressure [kPa]"].to_numpy(float)[index], plan["gas_temperature [degC]"].to_numpy(float)[index],
        (plan["collected_over_water"] == "true").to_numpy(bool)[index],
        plan["headspace_volume [mL]"].to_numpy(float)[index], liquid[index] * 1e6,
    )
    traces = pd.DataFrame({
        "trial_id": plan["trial_id"].to_numpy()[index],
        "time [s]": t,
        "value": _noisy(rng, mode, clean, noise),
    })

    r0 = ratio * n_lim * (k_blank + k_cat0)
    r0_blank = ratio * n_lim * k_blank
    with np.errstate(divide="ignore", invalid="ignore"):
        tof = np.where(blank, np.nan, k_cat0 * n_lim / sites)
    finite = np.isfinite(tau)
    plateau = ratio * n_lim * np.where(finite, -np.expm1(-k_cat0 * np.where(finite, tau, 0.0)), 1.0)
    trial_truth = pd.DataFrame({
        "trial_id": plan["trial_id"].to_numpy(),
        "catalyst_id": plan["catalyst_id"].fillna("").to_numpy(),
        "temperature_K": T,
        "measurement": plan["measurement"].to_numpy(),
        "product_ratio": ratio,
        "sites_mol": sites,
        "k_obs0": k_blank + k_cat0,
        "r0_true": r0,
        "r0_blank_true": r0_blank,
        "tof_true": tof,
        "tof_product_true": tof * ratio,
        "plateau_true": plateau,
        "photo_factor": plan["_photo"].to_numpy(float),
    })
    return Campaign(
        catalysts=catalysts.loc[:, list(CATALYST_HEADERS)].reset_index(drop=True),
        trials=plan.loc[:, list(TRIAL_HEADERS)].reset_index(drop=True),
        traces=traces,
        truth=truth.reset_index(drop=True),
        trial_truth=trial_truth,
    )


def _optional(plan, column, default):
    """A private plan column as floats, or ``default`` everywhere when the plan does not have it."""
    return plan[column].to_numpy(float) if column in plan.columns else np.full(len(plan), float(default))


def _instrument_columns(rng, modes, n_lim_mmol, liquid_mL):
    """Per-trial instrument settings and baselines for the given measurement modes (CSV units).

    Invented but typical set-ups: a 250 mL burette read at room conditions (half of them over water) with a small dead
    volume; a vessel of 30-80 g on a balance; a sealed reactor with 250 mL headspace filled at ~101 kPa; an analyser
    with a small zero offset.
    """
    n = len(modes)
    modes = np.asarray(modes)
    gas = modes == "gas_volume"
    cols = {
        "measurement": modes,
        "signal_unit": np.array([_MODES[m][0] for m in modes]),
        "limiting_amount [mmol]": n_lim_mmol,
        "product_ratio": np.where(modes == "concentration", 1.0, 3.0),
        "liquid_volume [mL]": liquid_mL,
        "initial_concentration [mol/L]": _round_to(np.asarray(n_lim_mmol) / np.asarray(liquid_mL), 1e-4),
        "gas_pressure [kPa]": np.where(gas, _round_to(rng.uniform(99.0, 102.5, n), 0.01), np.nan),
        "gas_temperature [degC]": np.where(gas, _round_to(rng.uniform(20.5, 23.5, n), 0.1), np.nan),
        "gas_molar_mass [g/mol]": np.where(modes == "mass_loss", round(M_H2 * 1e3, 3), np.nan),
        "headspace_volume [mL]": np.where(modes == "pressure", 250.0, np.nan),
        "collected_over_water": np.where(gas, np.where(rng.random(n) < 0.5, "true", "false"), None),
    }
    baseline = np.select(
        [gas, modes == "mass_loss", modes == "pressure"],
        [_round_to(rng.uniform(0.3, 1.5, n), 0.01), _round_to(rng.uniform(30.0, 80.0, n), 1e-4),
         _round_to(rng.uniform(100.5, 102.0, n), 1e-3)],
        _round_to(rng.uniform(0.0, 0.4, n), 0.01),
    )
    return cols, baseline


def _started_at(rng, n, first_day="2026-03-02"):
    """Start stamps spread over working days from ``first_day``: six slots a day, a few minutes of jitter."""
    days = np.busday_offset(np.datetime64(first_day), np.arange(n) // 6, roll="forward")
    minutes = 8 * 60 + 30 + (np.arange(n) % 6) * 80 + rng.integers(0, 20, n)
    stamps = days.astype("datetime64[m]") + minutes.astype("timedelta64[m]")
    return np.datetime_as_string(stamps, unit="s")


def _catalyst_frame(rows):
    """v1 catalysts table from spec dicts (missing keys = empty cells)."""
    return pd.DataFrame([{h: row.get(h, np.nan) for h in CATALYST_HEADERS} for row in rows])


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
_DEMO_TEMPERATURES = (25.0, 35.0, 45.0, 55.0)
_CLEAN_PARTICLE_UM = 5.0  # fine powder: keeps the Weisz-Prater number of clean catalysts below 0.1
_EFFECTIVE_DIFFUSIVITY = 1e-9  # m²/s, a typical liquid-filled-pore value (common practice, no source)
_PARTICLE_DENSITY = 1.4  # g/cm³, porous support particle
_CATALYSED_CAP = 40 * 60.0  # s: bench time per catalysed trial, so the slowest runs stop part-way
_PHOTO_GAIN = 1.8  # invented rate gain under 365 nm light on the titania catalyst
_REPLICATE_SCATTER = {"": 0.04, "poor_replicates": 0.30}  # lognormal sd of the rate between replicates


def _tof_from_half_life(half_min, mass_mg, metal, loading, dispersion, site_density):
    """TOF at c_std that gives the requested half-life for the standard charge (first order, blank neglected).

    .. math:: \\mathrm{TOF}_\\mathrm{ref} = \\frac{\\ln 2}{t_{1/2}}\\,\\frac{c_\\mathrm{std} V_\\mathrm{std}}{N}
    """
    sites = _sites([mass_mg], [metal], [loading], [dispersion], [site_density])[0]
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
        spec = {"problem": "", "tau": np.inf, "particle": _CLEAN_PARTICLE_UM, "dispersion": np.nan,
                "site_density": np.nan, **spec}
        if "tof_of" in spec:  # a loading series shares one TOF, so its rates scale with the site count
            spec["tof_ref"] = next(s["tof_ref"] for s in specs if s["catalyst_id"] == spec["tof_of"])
        else:
            spec["tof_ref"] = _tof_from_half_life(spec["half"], spec["mass"], spec["metal"], spec["loading"],
                                                  spec["dispersion"], spec["site_density"])
        specs.append(spec)
    catalysts = _catalyst_frame(
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
        temps = (35.0,) if spec["problem"] == "single_temperature" else _DEMO_TEMPERATURES
        rows += [(spec, temp, 0.1, 10.0, False, "") for temp in temps for _ in range(2)]
    by_id = {s["catalyst_id"]: s for s in specs}
    rows += [(by_id["RuC-02"], 35.0, c0, 5.0, False, "concentration series") for c0 in (0.05, 0.1, 0.2, 0.4)]
    rows += [(by_id["PtTi-10"], 25.0, 0.1, 10.0, True, "illuminated from below, 365 nm LED") for _ in range(2)]
    rows += [(None, temp, 0.1, 10.0, False, "uncatalysed blank") for temp in _DEMO_TEMPERATURES for _ in range(2)]
    rows = [rows[i] for i in rng.permutation(len(rows))]  # bench order is mixed, not catalyst by catalyst
    n = len(rows)

    # Modes cycle so every catalyst sees several; blanks stay on the burette, the most sensitive read-out.
    # The concentration series stays on the burette too, so its order fit compares like with like.
    cycle = ("gas_volume", "mass_loss", "gas_volume", "pressure", "gas_volume", "concentration")
    on_burette = np.array([r[0] is None or r[5] == "concentration series" for r in rows])
    modes = np.where(on_burette, "gas_volume", np.array([cycle[i % len(cycle)] for i in range(len(rows))]))
    liquid = np.array([r[3] for r in rows])
    n_lim = _round_to(np.array([r[2] for r in rows]) * liquid, 1e-4)  # mol/L × mL = mmol
    cols, baseline = _instrument_columns(rng, modes, n_lim, liquid)

    catalysed = np.array([r[0] is not None for r in rows])
    spec_of = [r[0] or {} for r in rows]
    mass = np.where(catalysed, _round_to([s.get("mass", 0.0) + rng.uniform(-0.5, 0.5) for s in spec_of], 0.1),
                    np.nan)
    temp_c = _round_to(np.array([r[1] for r in rows]) + rng.normal(0.0, 0.1, n), 0.1)
    T = temp_c + zero_Celsius
    problem = np.array([s.get("problem", "") for s in spec_of])
    scatter = np.exp(rng.normal(0.0, 1.0, n) * np.array([_REPLICATE_SCATTER.get(p, 0.04) for p in problem]))
    photo = np.array([_PHOTO_GAIN if r[4] else 1.0 for r in rows])
    tof_std = np.array([s.get("tof_ref", 0.0) for s in spec_of]) * _arrhenius(
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
        "operator": rng.choice(_OPERATORS, n),
        "started_at": _started_at(rng, n),
        "notes": [r[5] or None for r in rows],
        "effective_diffusivity [m^2/s]": np.where(catalysed, _EFFECTIVE_DIFFUSIVITY, np.nan),
        "particle_density [g/cm^3]": np.where(catalysed, _PARTICLE_DENSITY, np.nan),
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
    _, k_blank, k_cat0 = _rate_constants(plan)
    k_obs = k_blank + k_cat0
    # About 4.5 half-lives (or 4 deactivation times), capped at the bench time; blanks run long.
    span = np.where(np.isfinite(tau), np.minimum(4.5 * np.log(2) / k_obs, 4 * tau), 4.5 * np.log(2) / k_obs)
    plan["_duration"] = np.where(catalysed, _round_to(np.minimum(span, _CATALYSED_CAP), 10.0), BLANK_DURATION)
    # Logged instruments sample densely; burette and analyser readings are taken by hand.
    plan["_points"] = np.where(np.isin(modes, ("mass_loss", "pressure")), rng.integers(110, 151, n),
                               rng.integers(40, 71, n))
    return _assemble(plan, catalysts, truth, rng, 1.0)


def known_kinetics_campaign(n_catalysts=6, temperatures_C=(25, 35, 45, 55), replicates=2, seed=0, noise=1.0,
                            n_points=80) -> Campaign:
    """A clean campaign with known, well-separated kinetics for recovery tests.

    Catalyst i has TOF_ref = 0.2 · 2^i 1/s (a factor of two apart) and an activation energy from an even grid over
    35-75 kJ/mol in seeded order. Each catalyst's mass is chosen so its standard trial has a half-life near 8 min at
    35 °C; every trial runs 4.5 half-lives (no bench-time cap). Blanks are run at every temperature; the four
    measurement modes rotate over the trials.

    Parameters
    ----------
    n_catalysts : int
        Number of catalysts.
    temperatures_C : sequence of float
        Set temperatures in °C.
    replicates : int
        Trials per catalyst and temperature (and blanks per temperature).
    seed : int
        Seed of the numpy random generator.
    noise : float
        Multiplier on instrument noise and on the 4 % replicate scatter; 0 gives exact, noise-free traces.
    n_points : int
        Readings per trace.

    Returns
    -------
    Campaign
    """
    rng = np.random.default_rng(seed)
    metals = ("Pt", "Ru", "Rh", "Pd", "Ir", "Ni")
    supports = ("C", "Al2O3", "TiO2", "SiO2", "CeO2")
    eas = rng.permutation(np.linspace(35e3, 75e3, n_catalysts))
    specs = []
    for i in range(n_catalysts):
        metal, support = metals[i % len(metals)], supports[i % len(supports)]
        # Loading falls as TOF rises so that the catalyst masses stay in a weighable 1-50 mg range.
        tof = 0.2 * 2.0**i
        loading = float(_round_to(10.0 * 0.05 ** (i / max(n_catalysts - 1, 1)), 0.1))
        dispersion = float(30 + 10 * (i % 4))
        sites_per_mg = _sites([1.0], [metal], [loading], [dispersion], [np.nan])[0]
        mass = _round_to(np.log(2) / (8 * 60.0) * C_STD * V_STD / (tof * sites_per_mg), 0.1)
        specs.append(dict(catalyst_id=f"K{i + 1:02d}", metal=metal, support=support, loading=loading,
                          dispersion=dispersion, ea=eas[i], tof_ref=tof, mass=max(float(mass), 0.5)))
    catalysts = _catalyst_frame(
        {"catalyst_id": s["catalyst_id"], "metal": s["metal"], "metal_loading [wt%]": s["loading"],
         "dispersion [%]": s["dispersion"], "surface_area [m^2/g]": 150.0, "support": s["support"],
         "description": "known-kinetics fixture", "batch": "K", "price_per_gram": 10.0}
        for s in specs
    )
    truth = pd.DataFrame(
        [{"catalyst_id": s["catalyst_id"], "ea_J_per_mol": s["ea"], "tof_ref": s["tof_ref"], "t_ref_K": T_REF_K,
          "k_blank_ref": np.nan, "tau_s": np.inf, "order": 1.0, "problem": ""} for s in specs]
        + [{"catalyst_id": "blank", "ea_J_per_mol": BLANK_EA, "tof_ref": np.nan, "t_ref_K": T_REF_K,
            "k_blank_ref": BLANK_K_REF, "tau_s": np.inf, "order": 1.0, "problem": "blank"}]
    )
    spec_of = [s for s in specs + [{}] for _ in temperatures_C for _ in range(replicates)]
    temp_c = np.array([float(t) for _ in specs + [{}] for t in temperatures_C for _ in range(replicates)])
    n = len(spec_of)
    catalysed = np.array([bool(s) for s in spec_of])
    modes = np.array([_MODE_NAMES[i % 4] if catalysed[i] else "gas_volume" for i in range(n)])
    n_lim, liquid = np.full(n, 1.0), np.full(n, 10.0)  # the standard charge: 1 mmol in 10 mL (c_std, V_std)
    cols, baseline = _instrument_columns(rng, modes, n_lim, liquid)
    T = temp_c + zero_Celsius
    scatter = np.exp(noise * 0.04 * rng.normal(0.0, 1.0, n))
    tof_std = np.array([s.get("tof_ref", 0.0) for s in spec_of]) * _arrhenius(
        T, np.array([s.get("ea", 0.0) for s in spec_of])) * scatter
    mass = np.where(catalysed, [s.get("mass", np.nan) for s in spec_of], np.nan)
    plan = pd.DataFrame({
        "trial_id": [f"T{i + 1:04d}" for i in range(n)],
        "catalyst_id": pd.array([s.get("catalyst_id") for s in spec_of], dtype="str"),
        "temperature [degC]": temp_c,
        "catalyst_mass [mg]": mass,
        **cols,
        "particle_size [um]": np.where(catalysed, _CLEAN_PARTICLE_UM, np.nan),
        "light_wavelength [nm]": np.nan,
        "light_power [mW]": np.nan,
        "operator": _OPERATORS[0],
        "started_at": _started_at(rng, n),
        "notes": np.where(catalysed, None, "uncatalysed blank"),
        "effective_diffusivity [m^2/s]": np.where(catalysed, _EFFECTIVE_DIFFUSIVITY, np.nan),
        "particle_density [g/cm^3]": np.where(catalysed, _PARTICLE_DENSITY, np.nan),
        "reaction_enthalpy [kJ/mol]": np.nan,
        "heat_capacity [J/K]": np.nan,
        "_metal": [s.get("metal") for s in spec_of],
        "_loading": [s.get("loading", np.nan) for s in spec_of],
        "_dispersion": [s.get("dispersion", np.nan) for s in spec_of],
        "_site_density": np.nan,
        "_tof_std": tof_std,
        "_tau": np.inf,
        "_photo": 1.0,
        "_baseline": baseline,
        "_points": n_points,
    })
    _, k_blank, k_cat0 = _rate_constants(plan)
    k_obs = k_blank + k_cat0
    plan["_duration"] = np.where(catalysed, _round_to(4.5 * np.log(2) / k_obs, 1.0), BLANK_DURATION)
    return _assemble(plan, catalysts, truth, rng, noise)


def write_campaign(campaign: Campaign, directory) -> None:
    """Write the three v1 CSV files of a campaign into ``directory`` (created if missing).

    UTF-8, comma-separated, no index, ``\\n`` line ends, empty cell for a missing value; numbers are written with
    Python's shortest round-trip representation, so reading them back gives the same floats.

    Parameters
    ----------
    campaign : Campaign
    directory : str or path-like
    """
    folder = Path(directory)
    folder.mkdir(parents=True, exist_ok=True)
    for name, frame in (("catalysts.csv", campaign.catalysts), ("trials.csv", campaign.trials),
                        ("traces.csv", campaign.traces)):
        frame.to_csv(folder / name, index=False, encoding="utf-8", lineterminator="\n")


def write_bulk_campaign(directory, n_trials: int, n_points: int = 200, seed: int = 0, chunk: int = 5000) -> dict:
    """Write a large clean campaign for benchmarks, generating and appending the trace table chunk by chunk.

    Twenty stable catalysts (TOF_ref log-uniform over 0.3-5 1/s, Ea uniform over 35-75 kJ/mol) and about 5 %
    blanks at 25-55 °C; 85 % of trials read a gas burette, 5 % each the balance, the sealed reactor and the
    analyser. Kinetics follow the module's first-order model; each trial spans 4.5 half-lives with ``n_points``
    evenly spaced readings. Only one chunk of traces (``chunk × n_points`` rows) is held in memory at a time.

    Parameters
    ----------
    directory : str or path-like
        Output folder (created if missing); receives catalysts.csv, trials.csv and traces.csv.
    n_trials : int
        Number of trials.
    n_points : int, default 200
        Readings per trace.
    seed : int, default 0
        Seed of the numpy random generator.
    chunk : int, default 5000
        Trials generated and written per step.

    Returns
    -------
    dict
        ``catalysts``, ``trials``, ``blank_trials``, ``trace_rows`` (counts) and ``truth`` (per-catalyst
        DataFrame with the columns of :attr:`Campaign.truth`).
    """
    folder = Path(directory)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    n_cat = 20
    metals = np.array(("Pt", "Ru", "Rh", "Pd"))[np.arange(n_cat) % 4]
    loading = _round_to(rng.uniform(0.5, 10.0, n_cat), 0.1)
    dispersion = _round_to(rng.uniform(10.0, 70.0, n_cat), 1.0)
    ids = np.array([f"C{i + 1:03d}" for i in range(n_cat)])
    catalysts = _catalyst_frame(
        {"catalyst_id": ids[i], "metal": metals[i], "metal_loading [wt%]": loading[i],
         "dispersion [%]": dispersion[i], "surface_area [m^2/g]": 150.0, "support": "Al2O3",
         "description": "bulk benchmark catalyst", "batch": "BULK", "price_per_gram": 10.0}
        for i in range(n_cat)
    )
    tof_ref = np.exp(rng.uniform(np.log(0.3), np.log(5.0), n_cat))
    ea = rng.uniform(35e3, 75e3, n_cat)
    truth = pd.DataFrame({"catalyst_id": ids, "ea_J_per_mol": ea, "tof_ref": tof_ref, "t_ref_K": T_REF_K,
                          "k_blank_ref": np.nan, "tau_s": np.inf, "order": 1.0, "problem": ""})

    which = rng.integers(0, n_cat, n_trials)
    catalysed = rng.random(n_trials) >= 0.05
    modes = rng.choice(np.array(_MODE_NAMES), n_trials, p=(0.85, 0.05, 0.05, 0.05))
    modes = np.where(catalysed, modes, "gas_volume")
    n_lim, liquid = np.full(n_trials, 1.0), np.full(n_trials, 10.0)  # standard charge, as in the demo
    cols, baseline = _instrument_columns(rng, modes, n_lim, liquid)
    temp_c = rng.choice(np.array(_DEMO_TEMPERATURES), n_trials)
    mass = np.where(catalysed, _round_to(rng.uniform(5.0, 30.0, n_trials), 0.1), np.nan)
    tof_std = tof_ref[which] * _arrhenius(temp_c + zero_Celsius, ea[which])
    plan = pd.DataFrame({
        "trial_id": np.char.add("B", np.char.zfill(np.arange(1, n_trials + 1).astype(str), 7)),
        "catalyst_id": pd.array(np.where(catalysed, ids[which], None), dtype="str"),
        "temperature [degC]": temp_c,
        "catalyst_mass [mg]": mass,
        **cols,
        "_metal": np.where(catalysed, metals[which], None),
        "_loading": loading[which],
        "_dispersion": dispersion[which],
        "_site_density": np.nan,
        "_tof_std": tof_std,
    })
    plan["notes"] = np.where(catalysed, None, "uncatalysed blank")
    for header in TRIAL_HEADERS:
        if header not in plan:
            plan[header] = np.nan
    plan.loc[:, list(TRIAL_HEADERS)].to_csv(folder / "trials.csv", index=False, encoding="utf-8",
                                            lineterminator="\n")
    catalysts.to_csv(folder / "catalysts.csv", index=False, encoding="utf-8", lineterminator="\n")

    _, k_blank, k_cat0 = _rate_constants(plan)
    # At least one second per reading, so readings rounded to 0.1 s never repeat a time on a very fast trial.
    duration = np.where(catalysed, np.maximum(_round_to(4.5 * np.log(2) / (k_blank + k_cat0), 1.0), n_points),
                        BLANK_DURATION)
    ratio = plan["product_ratio"].to_numpy(float)
    mode_index = plan["measurement"].map({m: i for i, m in enumerate(_MODE_NAMES)}).to_numpy(int)
    over_water = cols["collected_over_water"] == "true"
    trial_ids = plan["trial_id"].to_numpy(str)
    grid = np.linspace(0.0, 1.0, n_points)
    schema = pa.schema([("trial_id", pa.string()), ("time [s]", pa.float64()), ("value", pa.float64())])
    # The header is written by hand because Arrow quotes header names even when they need no quotes.
    options = pa_csv.WriteOptions(include_header=False, quoting_style="none")  # plain generated ids, nothing to quote
    with open(folder / "traces.csv", "wb") as sink, pa_csv.CSVWriter(sink, schema, write_options=options) as writer:
        sink.write((",".join(TRACE_HEADERS) + "\n").encode())
        for start in range(0, n_trials, chunk):
            part = slice(start, min(start + chunk, n_trials))
            rows = np.arange(n_trials)[part]
            t = _round_to(duration[rows, None] * grid, 0.1)
            n = (ratio[rows] * n_lim[rows] * 1e-3)[:, None] * _converted(
                t, k_blank[rows, None], k_cat0[rows, None], np.inf)
            mode = np.broadcast_to(mode_index[rows, None], t.shape)
            clean = _signal(
                mode, n, baseline[rows, None], temp_c[rows, None] + zero_Celsius,
                cols["gas_pressure [kPa]"][rows, None], cols["gas_temperature [degC]"][rows, None],
                over_water[rows, None], cols["headspace_volume [mL]"][rows, None],
                liquid[rows, None],
            )
            values = _noisy(rng, mode, clean, 1.0)
            writer.write_table(pa.table({
                "trial_id": pa.array(np.repeat(trial_ids[rows], n_points)),
                "time [s]": t.ravel(),
                "value": values.ravel(),
            }, schema=schema))
    return {
        "catalysts": n_cat,
        "trials": n_trials,
        "blank_trials": int((~catalysed).sum()),
        "trace_rows": n_trials * n_points,
        "truth": truth,
    }
