"""Building blocks of the seeded synthetic campaigns (demo, known-truth, bulk): kinetic truth, sites, signals, files.

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
from scipy.constants import R, zero_Celsius

from catalog.core.signals import molar_mass, water_vapour_pressure

__all__ = [
    "CATALYST_HEADERS",
    "TRACE_HEADERS",
    "TRIAL_HEADERS",
    "Campaign",
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
MODE_NAMES = tuple(_MODES)
OPERATORS = ("I. Brandt", "K. Osei", "P. Mori", "V. Lund")


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


def arrhenius(T, ea, t_ref=T_REF_K):
    """Arrhenius factor relative to the reference temperature.

    .. math:: f = \\exp\\left[-\\frac{E_a}{R}\\left(\\frac1T - \\frac1{T_\\mathrm{ref}}\\right)\\right]
    """
    return np.exp(-np.asarray(ea, dtype=float) / R * (1.0 / np.asarray(T, dtype=float) - 1.0 / t_ref))


def site_amounts(mass_mg, metal, loading_wt_pct, dispersion_pct, site_density_umol_g):
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


def converted(t, k_blank, k_cat0, tau):
    """Fraction of the limiting reactant converted by time t.

    .. math:: X(t) = 1 - \\exp\\left[-k_b t - k_{c,0}\\,\\tau\\,(1 - e^{-t/\\tau})\\right],
        \\quad \\tau\\to\\infty:\\; k_{c,0}\\,\\tau\\,(1 - e^{-t/\\tau}) \\to k_{c,0}\\,t
    """
    finite = np.isfinite(tau)
    tau_safe = np.where(finite, tau, 1.0)
    catalysed = k_cat0 * np.where(finite, -tau_safe * np.expm1(-t / tau_safe), t)
    return -np.expm1(-k_blank * t - catalysed)


def signal(mode, n, baseline, temperature_K, gas_pressure_kPa, gas_temperature_C, over_water, headspace_mL,
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


def noisy(rng, mode, clean, noise):
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


def round_to(values, step):
    """Round to a multiple of ``step``, then to the digits ``step`` implies so the CSV carries no float residue."""
    digits = max(0, int(-np.floor(np.log10(step))))
    return np.round(np.round(np.asarray(values, dtype=float) / step) * step, digits)


def rate_constants(plan):
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
    sites = np.where(blank, 0.0, site_amounts(plan["catalyst_mass [mg]"].fillna(0.0), plan["_metal"].fillna("H"),
                                        plan["_loading"], plan["_dispersion"], plan["_site_density"]))
    liquid = plan["liquid_volume [mL]"].to_numpy(float) * 1e-6
    k_cat0 = np.where(blank, 0.0, plan["_tof_std"].to_numpy(float) * sites / (C_STD * liquid))
    return sites, BLANK_K_REF * arrhenius(T, BLANK_EA), k_cat0


def assemble(plan, catalysts, truth, rng, noise):
    """Generate traces and per-trial truth from a trial plan and wrap everything as a :class:`Campaign`.

    ``plan`` holds the v1 trial columns (CSV units) plus private kinetic columns: ``_metal``, ``_loading``,
    ``_dispersion``, ``_site_density`` (catalyst columns joined), ``_tof_std`` (1/s at the trial temperature and
    c_std, including replicate scatter and light gain), ``_tau`` (s), ``_photo``, ``_duration`` (s), ``_points``,
    ``_baseline`` (signal unit); optionally ``_t_first`` (first reading as a fraction of the duration), ``_lag``
    (s, induction time constant) and ``_leak`` (fraction of the full yield lost by the end).
    """
    T = plan["temperature [degC]"].to_numpy(float) + zero_Celsius
    blank = plan["catalyst_id"].isna().to_numpy()
    sites, k_blank, k_cat0 = rate_constants(plan)
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
    t = round_to(fraction * duration[index], 0.1)
    # An induction period: activity ramps up as 1 - exp(-t/lag), so the kinetics run on the warped clock
    # t - lag (1 - exp(-t/lag)).
    lag = _optional(plan, "_lag", 0.0)[index]
    lag_safe = np.where(lag > 0, lag, 1.0)
    t_kin = np.where(lag > 0, t + lag_safe * np.expm1(-t / lag_safe), t)
    n = ratio[index] * n_lim[index] * converted(t_kin, k_blank[index], k_cat0[index], tau[index])
    # A leak: from 70 % of the duration on, the collected product falls linearly by the given fraction of the
    # charge's full yield by the end (the chemistry is unchanged; the vessel loses gas).
    leak = _optional(plan, "_leak", 0.0)[index]
    start = 0.7 * duration[index]
    n = n - leak * ratio[index] * n_lim[index] * np.clip((t - start) / (duration[index] - start), 0.0, 1.0)
    mode = plan["measurement"].map({m: i for i, m in enumerate(MODE_NAMES)}).to_numpy(int)[index]
    clean = signal(
        mode, n, plan["_baseline"].to_numpy(float)[index], T[index],
        plan["gas_pressure [kPa]"].to_numpy(float)[index], plan["gas_temperature [degC]"].to_numpy(float)[index],
        (plan["collected_over_water"] == "true").to_numpy(bool)[index],
        plan["headspace_volume [mL]"].to_numpy(float)[index], liquid[index] * 1e6,
    )
    traces = pd.DataFrame({
        "trial_id": plan["trial_id"].to_numpy()[index],
        "time [s]": t,
        "value": noisy(rng, mode, clean, noise),
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


def instrument_columns(rng, modes, n_lim_mmol, liquid_mL):
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
        "initial_concentration [mol/L]": round_to(np.asarray(n_lim_mmol) / np.asarray(liquid_mL), 1e-4),
        "gas_pressure [kPa]": np.where(gas, round_to(rng.uniform(99.0, 102.5, n), 0.01), np.nan),
        "gas_temperature [degC]": np.where(gas, round_to(rng.uniform(20.5, 23.5, n), 0.1), np.nan),
        "gas_molar_mass [g/mol]": np.where(modes == "mass_loss", round(M_H2 * 1e3, 3), np.nan),
        "headspace_volume [mL]": np.where(modes == "pressure", 250.0, np.nan),
        "collected_over_water": np.where(gas, np.where(rng.random(n) < 0.5, "true", "false"), None),
    }
    baseline = np.select(
        [gas, modes == "mass_loss", modes == "pressure"],
        [round_to(rng.uniform(0.3, 1.5, n), 0.01), round_to(rng.uniform(30.0, 80.0, n), 1e-4),
         round_to(rng.uniform(100.5, 102.0, n), 1e-3)],
        round_to(rng.uniform(0.0, 0.4, n), 0.01),
    )
    return cols, baseline


def started_at(rng, n, first_day="2026-03-02"):
    """Start stamps spread over working days from ``first_day``: six slots a day, a few minutes of jitter."""
    days = np.busday_offset(np.datetime64(first_day), np.arange(n) // 6, roll="forward")
    minutes = 8 * 60 + 30 + (np.arange(n) % 6) * 80 + rng.integers(0, 20, n)
    stamps = days.astype("datetime64[m]") + minutes.astype("timedelta64[m]")
    return np.datetime_as_string(stamps, unit="s")


def catalyst_frame(rows):
    """v1 catalysts table from spec dicts (missing keys = empty cells)."""
    return pd.DataFrame([{h: row.get(h, np.nan) for h in CATALYST_HEADERS} for row in rows])


CLEAN_PARTICLE_UM = 5.0  # fine powder: keeps the Weisz-Prater number of clean catalysts below 0.1
EFFECTIVE_DIFFUSIVITY = 1e-9  # m²/s, a typical liquid-filled-pore value (common practice, no source)
PARTICLE_DENSITY = 1.4  # g/cm³, porous support particle


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
