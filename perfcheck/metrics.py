"""Metrics stage: IEC 61724-1 yields and performance ratios, EPI, availability, coverage.

One pass of SQL (``sql/metrics_daily.sql``) turns the ``aligned`` rows into daily sums per
inverter; everything else is small pure functions over those sums. Every sum is additive, so
months, years, any period and the plant are sums of days and inverters, and the day-block
bootstrap resamples days whole and recomputes each ratio from the resampled sums.

Rules (also written into every result's ``settings``):

- Daylight row: sun above the horizon (zenith < 90 degrees at the interval's centre).
- Valid row: measured power, expected power and plane-of-array irradiance present and none of
  the excluded quality flags (default: all flags).
- Used row (yields, PR, EPI): daylight, valid, outside the exclusion windows (curtailment, and
  grid outages if chosen) and irradiance at least ``min_poa_wm2`` (default 0: IEC 61724-1 sums
  all daylight intervals).
- Availability base: daylight, valid, outside the exclusion windows, irradiance at least
  ``availability_min_poa_wm2``. The inverter is up in a base interval when its AC power is at
  least ``availability_down_below_pct`` of its AC rating; with an analysis, it is down in the
  intervals its outage events cover (the ledger gives them to the outage), so availability
  and the events agree and a low output explained otherwise (shading, a fault of the data) is
  never downtime. Time-based availability is the
  P0-weighted share of base intervals that are up; energy-based availability is
  1 - (expected energy of the down intervals) / (expected energy of all base intervals).
  Excluded windows are outside the base, so curtailment and (if chosen) grid outages never count
  against the plant (IEC TS 63019:2019 treats them as outside the plant's responsibility; from
  memory). Rows without valid data are neither up nor down: they lower the coverage instead.
- Coverage: valid daylight intervals / daylight intervals of the calendar (computed from the
  geometric sunrise and sunset, so days with no rows at all count as missing). A value is
  reported only when coverage is at least ``min_coverage``; otherwise it is null with a reason.
- Irradiance uncertainty (:func:`irradiance_uncertainty`): the sensor's calibration where its
  reading is used; where the irradiance is modelled from GHI, the GHI sensor's calibration and
  the decomposition's DNI bias carried through the transposition, month by month, plus the
  range over the beam the decomposition cuts at low sun.
- Sensor-fault windows (detected events): the reference yield uses the modelled irradiance
  there, with the modelled-irradiance uncertainty, and the expected power (EPI, energy-based
  availability, gap filling of the specific yield) the expected power computed from that
  modelled irradiance (``expected_ac_modelled_w`` of ``aligned``); the rows and their expected
  energy are reported (``model_poa_intervals``, ``model_poa_expected_kwh``).
- Plant: sums over inverters. The plant's reference yield is the P0-weighted mean of the
  inverters' plane-of-array irradiation (each inverter's irradiance as ``aligned`` gives it for
  its plane), so a plant with several orientations gets PR = sum E / sum(P0_i H_i / G_STC).
"""

from __future__ import annotations

import datetime as dt
import json
import math
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import __version__, db, ingest, kinds, periods
from perfcheck import physics as ph
from perfcheck.errors import DataError
from perfcheck.site import Site, Table

G_STC = 1000.0  # reference irradiance [W/m^2] (IEC 61724-1)
FLAG_NAMES = ("out_of_range", "stuck", "gap", "night_offset", "power_without_irradiance")
# Expanded (95 %) uncertainty of plane-of-array irradiation per IEC 61724-1 monitoring class.
# From memory, not verified against the standard's text: class A 3 %, class B 8 %, class C 10 %.
SENSOR_CLASS_UNCERTAINTY_PCT = {"A": 3.0, "B": 8.0, "C": 10.0}
# Temperature of the temperature-corrected PR (Settings.pr_temp_basis).
TEMP_BASES = ("module", "cell")
# Metrics with an interval: the ratios get a day-block bootstrap interval (those of
# IRRADIANCE_METRICS widened by the irradiance uncertainty, each being inversely proportional
# to the plane-of-array irradiation); the specific yield, a measured total, gets the band of
# its data gaps (see gap_band).
BOOTSTRAP_METRICS = (
    "pr",
    "pr_temp_corrected",
    "pr_weather_corrected",
    "epi",
    "availability",
    "availability_energy",
)
CI_METRICS = (*BOOTSTRAP_METRICS, "specific_yield_kwh_per_kwp")
IRRADIANCE_METRICS = ("pr", "pr_temp_corrected", "pr_weather_corrected", "epi")
# The additive daily columns the metrics are built from (after scaling by P0, see scope_sums).
SUM_COLUMNS = (
    "p0_w", "n_daylight", "n_nominal", "n_valid", "n_excluded", "n_used", "n_fallback", "n_dc",
    "e_meas_wh", "e_exp_wh", "e_exp_fallback_wh", "e_dc_wh", "ref_wh", "ref_sensor_wh",
    "ref_dni_wh", "ref_beam_wh",
    "refg_wh", "refgt_wh", "refgb_wh", "refgtb_wh", "w_base", "w_up", "e_base_exp_wh",
    "e_down_exp_wh", "e_meas_all_wh", "e_exp_all_wh", "e_exp_gap_wh", "e_ledger_meas_wh",
    "e_ledger_exp_wh", "e_delivered_wh", "e_rec_inv_wh", "e_rec_meter_wh",
)
# Sums that keep the inverters' basis in the plant's row when the plant is judged at the meter:
# the ledger's energies and the meter's reconciliation (see perfcheck.meter).
LEDGER_COLUMNS = ("e_ledger_meas_wh", "e_ledger_exp_wh", "e_delivered_wh", "e_rec_inv_wh",
                  "e_rec_meter_wh")


# --------------------------------------------------------------------------------------------
# settings


@dataclass(frozen=True)
class Settings:
    """Filtering rules and uncertainty settings (``[metrics]`` of the site file).

    Attributes (site-file keys; all optional)
    -----------------------------------------
    min_poa_wm2 : irradiance floor for the rows behind yields, PR and EPI [W/m^2]; 0 keeps
        all daylight rows as IEC 61724-1 sums them
    availability_min_poa_wm2 : irradiance from which an inverter is expected to run [W/m^2]
        (50, common practice)
    availability_down_below_pct : AC power below this share of the AC rating counts as down
        [%] (1, common practice)
    exclude_flags : quality flags that make a row invalid (default: all five)
    min_coverage : least share of daylight intervals with valid data before a value is
        reported [-] (0.8, common practice)
    exclude_curtailment : leave curtailment events out of yields, PR, EPI and availability
        (true; IEC 61724-1 and IEC TS 63019, from memory)
    exclude_grid_outages : leave plant-wide outage events out likewise (false: from power data
        alone they cannot be told from a plant fault)
    sensor_fault_fallback : inside sensor-fault events use the modelled plane-of-array
        irradiance for the reference yield and the expected power from it (true); counted
        as model_poa_intervals and model_poa_expected_kwh
    pr_temp_basis : the temperature of the temperature-corrected PR: "module" (default), the
        measured back-of-module temperature of IEC 61724-1's form C_k = 1 + gamma (T_mod,k -
        T_ref) (where none is measured: the model's cell temperature less the SAPM
        back-to-cell difference, King et al. 2004 eq. 12), or "cell", the model's cell
        temperature (from the measured module temperature plus that difference where there is
        one)
    pr_temp_ref_c : T_ref of the temperature-corrected PR [C] (25), or "annual" for the
        irradiance-weighted mean cell temperature (with ``pr_temp_basis = "cell"`` then equal
        to the weather-corrected PR)
    t_cell_typ_avg_c : T_cell_typ_avg of the weather-corrected PR [C] (default: from the
        site's data, with a note that it is not a typical year's)
    bootstrap_samples, confidence, seed : the day-block bootstrap (1000, 0.95, 61724)
    dni_bias_pct : expanded (95 %) relative bias of the decomposition's DNI over a month [%]
        (10; :func:`irradiance_uncertainty`)
    modelled_poa_uncertainty_pct : expanded uncertainty of modelled (transposed) irradiance
        [%] (5, common practice) behind the intervals of event energies (perfcheck.detect); the
        metrics propagate theirs from the physics (``dni_bias_pct``)

    The sensor's uncertainty is ``[model] poa_uncertainty_pct``, by default that of the
    ``[model] sensor_class`` (:data:`SENSOR_CLASS_UNCERTAINTY_PCT`).
    """

    min_poa_wm2: float = 0.0
    availability_min_poa_wm2: float = 50.0  # common practice, no source
    availability_down_below_pct: float = 1.0  # common practice, no source
    exclude_flags: tuple[str, ...] = FLAG_NAMES
    min_coverage: float = 0.8  # common practice, no source
    exclude_curtailment: bool = True
    exclude_grid_outages: bool = False
    sensor_fault_fallback: bool = True
    pr_temp_basis: str = "module"  # IEC 61724-1 module-temperature form, or "cell"
    pr_temp_ref_c: float | str = 25.0  # or "annual": T_ref = t_cell_typ_avg_c
    t_cell_typ_avg_c: float | None = None  # None: from the data
    bootstrap_samples: int = 1000
    confidence: float = 0.95
    seed: int = 61724
    poa_uncertainty_pct: float = 3.0
    poa_uncertainty_source: str = "IEC 61724-1 class A"  # the class's value from memory
    # DISC-type decomposition, the spread of a station's mean DNI bias: from memory, not checked
    # against the papers' tables (Gueymard & Ruiz-Arias 2016, Solar Energy 128:1; Ineichen
    # 2008, Solar Energy 82:501)
    dni_bias_pct: float = 10.0
    modelled_poa_uncertainty_pct: float = 5.0  # common practice, no source


def sensor_uncertainty(site: Site) -> tuple[float, str]:
    """Expanded (95 %) calibration uncertainty of the irradiance sensor [%] and its source:
    ``[model] poa_uncertainty_pct``, else that of ``[model] sensor_class``."""
    model = site.model
    if model.poa_uncertainty_pct is not None:
        return model.poa_uncertainty_pct, "site file model.poa_uncertainty_pct"
    return (SENSOR_CLASS_UNCERTAINTY_PCT[model.sensor_class],
            f"IEC 61724-1 class {model.sensor_class}")  # the class values from memory


def load_settings(site: Site) -> Settings:
    """Validate the optional ``[metrics]`` table of the site file into :class:`Settings`."""
    t = Table(site.raw.get("metrics", {}), "metrics", site.path)
    d = Settings()
    flags = t.get("exclude_flags", list, list(d.exclude_flags))
    for i, name in enumerate(flags):
        if name not in FLAG_NAMES:
            raise t._err(f"exclude_flags[{i}]", f"{name!r} is not one of "
                         f"{', '.join(map(repr, FLAG_NAMES))}")
    temp_ref = t.get("pr_temp_ref_c", (int, float, str), d.pr_temp_ref_c)
    if isinstance(temp_ref, bool) or (isinstance(temp_ref, str) and temp_ref != "annual"):
        raise t._err("pr_temp_ref_c", f"expected a temperature in C or 'annual', got {temp_ref!r}")
    if not isinstance(temp_ref, str):
        temp_ref = float(temp_ref)
        if not -40 <= temp_ref <= 90:
            raise t._err("pr_temp_ref_c", f"{temp_ref} is outside the range -40 to 90")
    samples = t.get("bootstrap_samples", int, d.bootstrap_samples)
    if not 100 <= samples <= 100_000:
        raise t._err("bootstrap_samples", f"{samples} is outside the range 100 to 100000")
    u_pct, u_source = sensor_uncertainty(site)
    s = Settings(
        min_poa_wm2=t.number("min_poa_wm2", d.min_poa_wm2, lo=0, hi=1500),
        availability_min_poa_wm2=t.number(
            "availability_min_poa_wm2", d.availability_min_poa_wm2, lo=0, hi=1500
        ),
        availability_down_below_pct=t.number(
            "availability_down_below_pct", d.availability_down_below_pct, lo=0, hi=50
        ),
        exclude_flags=tuple(flags),
        min_coverage=t.number("min_coverage", d.min_coverage, lo=0, hi=1),
        exclude_curtailment=t.get("exclude_curtailment", bool, d.exclude_curtailment),
        exclude_grid_outages=t.get("exclude_grid_outages", bool, d.exclude_grid_outages),
        sensor_fault_fallback=t.get("sensor_fault_fallback", bool, d.sensor_fault_fallback),
        pr_temp_basis=t.get("pr_temp_basis", str, d.pr_temp_basis, TEMP_BASES),
        pr_temp_ref_c=temp_ref,
        t_cell_typ_avg_c=t.number("t_cell_typ_avg_c", None, lo=-40, hi=90),
        bootstrap_samples=samples,
        confidence=t.number("confidence", d.confidence, lo=0.5, hi=0.999),
        seed=t.get("seed", int, d.seed),
        poa_uncertainty_pct=u_pct,
        poa_uncertainty_source=u_source,
        dni_bias_pct=t.number("dni_bias_pct", d.dni_bias_pct, lo=0, hi=100),
        modelled_poa_uncertainty_pct=t.number(
            "modelled_poa_uncertainty_pct", d.modelled_poa_uncertainty_pct, lo=0, hi=50
        ),
    )
    t.done()
    return s


# --------------------------------------------------------------------------------------------
# pure formulas


def corrected_reference(
    ref_wh: np.ndarray | float,
    refg_wh: np.ndarray | float,
    refgt_wh: np.ndarray | float,
    temp_ref: float,
) -> np.ndarray | float:
    r"""Temperature-corrected reference energy from the additive sums.

    Parameters
    ----------
    ref_wh : sum of P0 G_k tau_k / G_STC [Wh]
    refg_wh : sum of gamma P0 G_k tau_k / G_STC over rows with a cell temperature [Wh/C]
    refgt_wh : sum of gamma P0 G_k T_k tau_k / G_STC over the same rows [Wh]
    temp_ref : reference cell temperature T_ref [C]

    Returns
    -------
    sum of P0 (1 + gamma (T_k - T_ref)) G_k tau_k / G_STC [Wh]

    Notes
    -----
    The IEC 61724-1 temperature-corrected PR divides the AC energy by this sum (rated power of
    each interval corrected by C_k = 1 + gamma (T_k - T_ref)). With T_ref = T_cell_typ_avg it
    is also the denominator of the weather-corrected PR of Dierauf et al. 2013, eq. for PR_corr
    (1 - delta/100 (T_cell_typ_avg - T_cell) with delta = 100 gamma): the IEC
    annual-average-temperature variant and Dierauf's correction are the same formula.
    Rows without a cell temperature enter uncorrected.

    References
    ----------
    IEC 61724-1 (temperature-corrected PR; clause number from memory).
    Dierauf, T. et al. 2013, Weather-Corrected Performance Ratio, NREL/TP-5200-57991.
    """
    return ref_wh + refgt_wh - temp_ref * refg_wh


def ratios(s: Mapping[str, Any], temp_ref_c: float, t_cell_typ_avg_c: float) -> dict[str, Any]:
    """Yields and ratios from additive sums (scalars or arrays of equal shape).

    Parameters
    ----------
    s : the sums of :data:`SUM_COLUMNS` (energies [Wh], P0 [W], counts)
    temp_ref_c : T_ref of the temperature-corrected PR [C]
    t_cell_typ_avg_c : T_cell_typ_avg of the weather-corrected PR [C]

    Returns
    -------
    dict with yr_h, ya_h, yf_h, lc_h, ls_h [h = kWh/kWp], pr, pr_temp_corrected,
    pr_weather_corrected, epi, availability, availability_energy, specific_yield_kwh_per_kwp,
    coverage (NaN where a denominator is zero).

    Notes
    -----
    IEC 61724-1: Yr = H_POA / G_STC, Ya = E_DC / P0, Yf = E_AC / P0, PR = Yf / Yr,
    L_C = Yr - Ya, L_S = Ya - Yf. Ya is NaN unless DC power is measured on at least 99 % of the
    used rows. Specific yield: AC energy of all valid daylight rows plus, for the daylight rows
    without valid data, their expected energy times the EPI of the valid rows, per kWp.

    References
    ----------
    IEC 61724-1 (yields and PR); IEC 61836 (vocabulary). Dierauf et al. 2013,
    NREL/TP-5200-57991 (weather-corrected PR).
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        p0 = np.asarray(s["p0_w"], dtype=float)
        yr = _div(s["ref_wh"], p0)
        ya = np.where(np.asarray(s["n_dc"]) >= 0.99 * np.asarray(s["n_used"]),
                      _div(s["e_dc_wh"], p0), np.nan)
        ya = np.where(np.asarray(s["n_used"]) > 0, ya, np.nan)
        yf = _div(s["e_meas_wh"], p0)
        epi_all = _div(s["e_meas_all_wh"], s["e_exp_all_wh"])
        gap = np.asarray(s["e_exp_gap_wh"], dtype=float)
        return {
            "yr_h": yr,
            "ya_h": ya,
            "yf_h": yf,
            "lc_h": yr - ya,
            "ls_h": ya - yf,
            "pr": _div(s["e_meas_wh"], s["ref_wh"]),
            "pr_temp_corrected": _div(s["e_meas_wh"], corrected_reference(
                s["ref_wh"], s["refgb_wh"], s["refgtb_wh"], temp_ref_c)),
            "pr_weather_corrected": _div(s["e_meas_wh"], corrected_reference(
                s["ref_wh"], s["refg_wh"], s["refgt_wh"], t_cell_typ_avg_c)),
            "epi": _div(s["e_meas_wh"], s["e_exp_wh"]),
            "availability": _div(s["w_up"], s["w_base"]),
            "availability_energy": 1.0 - _div(s["e_down_exp_wh"], s["e_base_exp_wh"]),
            "specific_yield_kwh_per_kwp": _div(
                np.asarray(s["e_meas_all_wh"]) + np.where(gap > 0, gap * epi_all, 0.0), p0),
            "coverage": np.minimum(_div(s["n_valid"], s["n_nominal"]), 1.0),
        }


def _div(a: Any, b: Any) -> np.ndarray:
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(b != 0, a / np.where(b != 0, b, 1.0), np.nan)


def block_bootstrap(
    blocks: np.ndarray,
    statistic: Callable[[np.ndarray], np.ndarray],
    n_samples: int,
    confidence: float,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray]:
    """Percentile interval of a statistic of summed blocks, blocks resampled whole.

    Parameters
    ----------
    blocks : array (n_blocks, ...) of additive sums, one block per day
    statistic : maps summed blocks (n_samples, ...) to statistics (n_samples, ...)
    n_samples : number of bootstrap resamples
    confidence : two-sided level, e.g. 0.95
    rng : seeded generator (identical seeds give identical intervals)

    Returns
    -------
    (low, high) of the statistic's shape without the sample axis; NaN where fewer than two
    blocks or no finite resample.

    Notes
    -----
    Each resample draws n_blocks days with replacement (multinomial counts), sums them, and
    evaluates the statistic: a block bootstrap with the day as block, which keeps the
    autocorrelation within each day (Kunsch 1989, Ann. Statist. 17(3):1217; percentile
    interval: Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 13).
    """
    n = blocks.shape[0]
    shape = np.shape(statistic(blocks.sum(axis=0)[None, ...]))[1:]
    if n < 2:
        return np.full(shape, np.nan), np.full(shape, np.nan)
    counts = rng.multinomial(n, np.full(n, 1.0 / n), size=n_samples).astype(float)
    stats = np.asarray(statistic(np.tensordot(counts, blocks, axes=(1, 0))), dtype=float)
    stats[~np.isfinite(stats)] = np.nan
    alpha = (1.0 - confidence) / 2.0
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN columns give NaN
        low, high = np.nanquantile(stats, [alpha, 1.0 - alpha], axis=0)
    return low, high


def combine_band(value: Any, low: Any, high: Any, u_rel: Any) -> tuple[Any, Any]:
    """Widen a sampling interval by a systematic relative uncertainty, in quadrature.

    Parameters
    ----------
    value : the estimate (scalar or array)
    low, high : sampling interval at a confidence level
    u_rel : relative expanded uncertainty at the same level (e.g. 0.03 for 3 %) [-]

    Returns
    -------
    (low, high) with half-widths sqrt(d_sampling^2 + (value u_rel)^2) on each side.

    Notes
    -----
    The irradiance error is a calibration-type offset, the same on every day of a month, so it
    does not average down and the bootstrap cannot see it; the two are independent, so their
    half-widths add in quadrature (JCGM 100:2008, GUM, 5.1.2, uncorrelated inputs).
    """
    d = np.asarray(value) * np.asarray(u_rel)
    return value - np.hypot(value - low, d), value + np.hypot(high - value, d)


def gap_band(s: Mapping[str, Any]) -> tuple[Any, Any]:
    """Band of the specific yield from its data gaps [kWh/kWp].

    Parameters
    ----------
    s : additive sums (e_meas_all_wh, e_exp_all_wh, e_exp_gap_wh [Wh], p0_w [W])

    Returns
    -------
    (low, high): low assumes the daylight intervals without valid data produced nothing, high
    that they produced their expected energy times max(1, EPI of the valid intervals). Meter
    uncertainty is not included (not known from the site file).
    """
    epi = np.nan_to_num(_div(s["e_meas_all_wh"], s["e_exp_all_wh"]), nan=1.0)
    low = _div(s["e_meas_all_wh"], s["p0_w"])
    return low, low + _div(np.asarray(s["e_exp_gap_wh"]) * np.maximum(1.0, epi), s["p0_w"])


def daylight_seconds(
    site: Site, days: pd.DatetimeIndex, start: pd.Timestamp, end: pd.Timestamp
) -> np.ndarray:
    """Seconds of each local day between geometric sunrise and sunset, clipped to [start, end).

    Parameters
    ----------
    site : the site (latitude, longitude, time zone)
    days : local midnights (tz-aware, site zone)
    start, end : the analysed period (tz-aware)

    Returns
    -------
    daylight per day [s]; polar day gives 86400 (clipped), polar night 0.

    References
    ----------
    Spencer 1971, Search 2(5):172 (declination, equation of time), by
    :func:`perfcheck.physics.sunrise_sunset_geometric` (accuracy a few minutes, enough for
    counting intervals).
    """
    rise, sset = ph.sunrise_sunset_geometric(days, site.latitude_deg, site.longitude_deg)
    day_end = days + pd.Timedelta(days=1)
    dec = ph.declination_spencer71(days.day_of_year.to_numpy())
    polar_day = np.sign(dec) == np.sign(site.latitude_deg)
    rise = pd.Series(rise, index=days).fillna(pd.Series(np.where(polar_day, days, day_end),
                                                        index=days))
    sset = pd.Series(sset, index=days).fillna(pd.Series(np.where(polar_day, day_end, days),
                                                        index=days))
    lo = np.maximum(rise.to_numpy(), np.full(len(days), start.tz_convert(days.tz)))
    hi = np.minimum(sset.to_numpy(), np.full(len(days), end.tz_convert(days.tz)))
    return np.clip((hi - lo) / np.timedelta64(1, "s"), 0, None).astype(float)


# --------------------------------------------------------------------------------------------
# daily sums (the one SQL pass) and their scaling to scopes


def _inverter_table(site: Site, settings: Settings) -> pd.DataFrame:
    return pd.DataFrame({
        "inverter_id": [i.id for i in site.inverters],
        "down_w": [i.ac_kw * 1000.0 * settings.availability_down_below_pct / 100.0
                   for i in site.inverters],
        # P0-weighted SAPM back-to-cell difference at 1000 W/m2 [C] (King et al. 2004, table 1)
        "delta_t_c": [sum(a.dc_kwp * ph.sapm_parameters(a.mounting, a.construction)[2]
                          for a in i.arrays) / i.dc_kwp for i in site.inverters],
    })


def inverter_gamma(site: Site) -> dict[str, float]:
    """P0-weighted power temperature coefficient of each inverter's arrays [1/C]."""
    return {
        i.id: sum(a.dc_kwp * a.gamma_pct_per_c for a in i.arrays) / i.dc_kwp / 100.0
        for i in site.inverters
    }


def daily_sums(
    con: duckdb.DuckDBPyConnection,
    site: Site,
    start: pd.Timestamp,
    end: pd.Timestamp,
    settings: Settings,
    analysis_id: int | None = None,
    windows: pd.DataFrame | None = None,
    basis: str = "inverter",
    meter_factor: float = 1.0,
) -> pd.DataFrame:
    """Daily sums per inverter over ``aligned`` in ``[start, end)``, every calendar day present.

    The measured power and the one measured and expected energy come from the ledger of
    ``analysis_id`` (without one, from the aligned readings as they are). ``basis`` "meter"
    (with an analysis) takes the export meter's energy instead (``ledger.delivered_wh``) and
    the expected power times ``meter_factor``, the share that reaches the meter by design
    (:mod:`perfcheck.meter`).
    ``windows`` (see :func:`event_windows`) has columns action ('exclude' or 'model_poa'),
    scope ('plant' or 'inverter:<id>'), start_ts, end_ts (UTC).
    """
    if windows is None or windows.empty:
        windows = pd.DataFrame({
            "action": pd.Series([], dtype=object),
            "scope": pd.Series([], dtype=object),
            "start_ts": pd.Series([], dtype="datetime64[us, UTC]"),
            "end_ts": pd.Series([], dtype="datetime64[us, UTC]"),
        })
    step_s = shortest_interval(con)
    params = {"tz": site.timezone, "min_poa": settings.min_poa_wm2,
              "avail_min_poa": settings.availability_min_poa_wm2,
              "exclude_flags": list(settings.exclude_flags), "analysis": analysis_id,
              "downtime_kinds": [k.name for k in kinds.TABLE if k.downtime],
              "temp_basis": settings.pr_temp_basis, "basis": basis,
              "meter_factor": meter_factor}
    try:
        with db.registered(con, _metrics_inverters=_inverter_table(site, settings),
                           _metrics_windows=windows[["action", "scope", "start_ts", "end_ts"]]):
            parts = [con.execute(db.sql("metrics_daily"), {
                **params, "start": a.to_pydatetime(), "end": b.to_pydatetime()}).df()
                for a, b in _day_pieces(site, start, end, step_s)]
    except duckdb.CatalogException as exc:
        raise DataError(f"no aligned series in the database ({exc}); run the model first")\
            from None
    kept = [p for p in parts if len(p)] or parts[:1]
    df = kept[0] if len(kept) == 1 else pd.concat(kept, ignore_index=True)
    return complete_calendar(df, site, start, end, step_s)


# Aligned rows per piece of the daily sums' query: the join of a whole history's rows with the
# ledger outgrows the analysis's DuckDB pool (db.ANALYSIS_MEMORY_LIMIT) and spills to disk,
# which doubled the query's time on a site-year; pieces of whole days give the same sums (a
# day's rows are all in one piece).
DAILY_PIECE_ROWS = 2**18


def _day_pieces(site: Site, start: pd.Timestamp, end: pd.Timestamp, step_s: float
                ) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    """``[start, end)`` cut at the first instant of site-local days into pieces of about
    :data:`DAILY_PIECE_ROWS` aligned rows (``step_s``: the shortest logger interval [s])."""
    per_day = len(site.inverters) * 86400.0 / step_s
    if not math.isfinite(per_day) or per_day <= 0:
        return [(start, end)]
    days = max(1, int(DAILY_PIECE_ROWS // per_day))
    first = start.tz_convert(site.tz).tz_localize(None).normalize()
    naive = pd.date_range(first + pd.Timedelta(days=days),
                          end.tz_convert(site.tz).tz_localize(None), freq=f"{days}D")
    cuts = naive.tz_localize(site.tz, ambiguous=np.ones(len(naive), dtype=bool),
                             nonexistent="shift_forward").tz_convert("UTC")
    bounds = [start, *(c for c in cuts if start < c < end), end]
    return list(zip(bounds[:-1], bounds[1:], strict=True))


def shortest_interval(con: duckdb.DuckDBPyConnection) -> float:
    """The shortest logger interval stored at ingest [s] (NaN before any ingest)."""
    return min(ingest.channel_intervals(con).values(), default=float("nan"))


def complete_calendar(
    df: pd.DataFrame, site: Site, start: pd.Timestamp, end: pd.Timestamp, fallback: float
) -> pd.DataFrame:
    """Every (local day, inverter) of the period, zeros where no rows; nominal daylight count
    (at the inverter's interval in the period, else ``fallback`` [s]: the shortest stored)."""
    tz = site.tz
    first = start.tz_convert(tz).normalize()
    days = pd.date_range(first, end.tz_convert(tz) - pd.Timedelta(microseconds=1),
                         freq="D", tz=tz).normalize()
    ids = [i.id for i in site.inverters]
    grid = pd.MultiIndex.from_product([days.date, ids], names=["day", "inverter_id"])
    df = df.assign(day=pd.to_datetime(df["day"]).dt.date).set_index(["day", "inverter_id"])
    out = df.reindex(grid)
    counts = [c for c in out.columns if c != "interval_s"]
    out[counts] = out[counts].fillna(0.0)
    interval = out["interval_s"].groupby(level="inverter_id").transform(
        lambda s: s.mode().iloc[0] if s.notna().any() else fallback)
    daylight = pd.Series(daylight_seconds(site, days, start, end), index=days.date)
    nominal = np.floor(daylight.reindex(out.index.get_level_values("day")).to_numpy()
                       / interval.to_numpy() + 0.5)
    out["n_nominal"] = np.maximum(nominal, out["n_daylight"].to_numpy())
    out["interval_s"] = interval
    return out.reset_index()


def scope_sums(daily: pd.DataFrame, site: Site, meter_daily: pd.DataFrame | None = None
               ) -> pd.DataFrame:
    """Scale the per-inverter daily sums by P0 and add the plant; columns :data:`SUM_COLUMNS`.

    Returns one row per (day, scope), scope 'plant' or 'inverter:<id>'. With ``meter_daily``
    (the same sums on the meter's basis) the plant's row is the sum of those, its ledger
    energies (:data:`LEDGER_COLUMNS`) the inverters'.
    """
    inv = _scaled(daily, site)
    plant = inv.groupby("day", as_index=False)[list(SUM_COLUMNS)].sum()
    if meter_daily is not None:
        at = _scaled(meter_daily, site).groupby("day", as_index=False)[list(SUM_COLUMNS)].sum()
        at[list(LEDGER_COLUMNS)] = plant[list(LEDGER_COLUMNS)].to_numpy()
        plant = at
    plant.insert(1, "scope", "plant")
    return pd.concat([plant, inv], ignore_index=True)


def _scaled(daily: pd.DataFrame, site: Site) -> pd.DataFrame:
    """The per-inverter daily sums scaled by P0, one row per (day, 'inverter:<id>')."""
    p0 = {i.id: i.dc_kwp * 1000.0 for i in site.inverters}
    gamma = inverter_gamma(site)
    d = daily.copy()
    d["p0_w"] = d["inverter_id"].map(p0)
    g = d["inverter_id"].map(gamma)
    d["ref_wh"] = d["p0_w"] * d["h_whm2"] / G_STC
    d["ref_sensor_wh"] = d["p0_w"] * d["h_sensor_whm2"] / G_STC
    d["ref_dni_wh"] = d["p0_w"] * d["h_dni_whm2"] / G_STC
    d["ref_beam_wh"] = d["p0_w"] * d["h_beam_whm2"] / G_STC
    d["refg_wh"] = g * d["p0_w"] * d["h_t_whm2"] / G_STC
    d["refgt_wh"] = g * d["p0_w"] * d["ht_whm2c"] / G_STC
    d["refgb_wh"] = g * d["p0_w"] * d["h_tb_whm2"] / G_STC
    d["refgtb_wh"] = g * d["p0_w"] * d["htb_whm2c"] / G_STC
    d["w_base"] = d["p0_w"] * d["n_base"]
    d["w_up"] = d["p0_w"] * d["n_up"]
    d["scope"] = "inverter:" + d["inverter_id"].astype(str)
    return d[["day", "scope", *SUM_COLUMNS]]


# --------------------------------------------------------------------------------------------
# summaries with intervals


ADDITIVE = tuple(c for c in SUM_COLUMNS if c != "p0_w")


def _sums(tot: np.ndarray, p0: np.ndarray) -> dict[str, np.ndarray]:
    """Named sums from an array (..., n_scopes, len(ADDITIVE)) and P0 per scope [W]."""
    s = {c: tot[..., j] for j, c in enumerate(ADDITIVE)}
    s["p0_w"] = np.broadcast_to(p0, tot.shape[:-1])
    return s


def irradiance_uncertainty(ref_wh: Any, ref_sensor_wh: Any, ref_dni_wh: Any, ref_beam_wh: Any,
                           u_sensor: float, dni_bias: float) -> np.ndarray:
    r"""Relative expanded uncertainty of the reference irradiation of a period [-].

    Parameters
    ----------
    ref_wh : sum of P0 G_k tau_k / G_STC [Wh]
    ref_sensor_wh : the same over the rows where G_k is the plane-of-array sensor's reading [Wh]
    ref_dni_wh : sum of P0 c_k tau_k / G_STC over the other rows (modelled from GHI), c_k the
        modelled irradiance's change per relative change of the decomposition's DNI with GHI
        held (:func:`perfcheck.physics.poa_decomposition_terms`) [Wh]
    ref_beam_wh : sum of P0 r_k tau_k / G_STC over the same rows, r_k the modelled
        irradiance's range over the beam the decomposition cannot see at low sun
        (:func:`perfcheck.physics.poa_decomposition_terms`) [Wh]
    u_sensor : relative expanded uncertainty of the irradiance sensor (plane-of-array or GHI) [-]
    dni_bias : relative expanded bias of the decomposition's DNI over the period [-]

    Returns
    -------
    (u_sensor H_s + sqrt((u_sensor H_m)^2 + (dni_bias |C|)^2) + |R|) / H, with H = ``ref_wh``,
    H_s = ``ref_sensor_wh``, H_m = H - H_s, C = ``ref_dni_wh`` and R = ``ref_beam_wh``.

    Notes
    -----
    The modelled share has two errors: the GHI sensor's calibration, which scales the modelled
    irradiance in proportion (to first order), and the decomposition's split of GHI into beam
    and diffuse, whose effect on the plane's irradiance the transposition gives interval by
    interval (c_k). Both are biases over a month, the same in every interval and for every
    inverter (one sensor, one decomposition), so each is summed linearly over the intervals
    and inverters; they are independent of each other and add in quadrature (JCGM 100:2008,
    GUM, 5.1.2). The decomposition's random error, which averages down over a month, is left
    to the day-block bootstrap. The sensor's share and the modelled share are added linearly
    (not taken as independent: the same sensor class may serve both). A fixed plane in summer
    sees about as much beam as the horizontal, so c_k is small and the GHI sensor dominates; a
    tracker at low sun sees far more, and the decomposition dominates. The DNI bias of DISC
    and similar decomposition models is ``dni_bias_pct`` (Settings): the validations of
    Gueymard & Ruiz-Arias 2016 (Solar Energy 128:1) and Ineichen 2008 (Solar Energy 82:501)
    report station mean biases of the modelled DNI within about +-10 % (from memory).

    Below the decomposition's range of validity (low sun, where DISC's beam is cut) the beam
    is not biased but unknown, between nothing and a physical bound; R is the modelled
    irradiance's range over it. The same cut acts in every such interval, so R too is summed
    linearly, and as the estimate sits at the range's lower end, R is a limit of the error
    rather than a standard deviation: it is added to the expanded uncertainty in full, not in
    quadrature (a bound, so no independence is assumed).
    """
    h, h_s = np.asarray(ref_wh, dtype=float), np.asarray(ref_sensor_wh, dtype=float)
    modelled = np.hypot(u_sensor * (h - h_s), dni_bias * np.abs(np.asarray(ref_dni_wh)))
    return _div(u_sensor * h_s + modelled + np.abs(np.asarray(ref_beam_wh, dtype=float)), h)


def _uncertainty(s: Mapping[str, np.ndarray], settings: Settings) -> np.ndarray:
    """:func:`irradiance_uncertainty` of the sums ``s`` with the settings' values."""
    return irradiance_uncertainty(s["ref_wh"], s["ref_sensor_wh"], s["ref_dni_wh"],
                                  s["ref_beam_wh"], settings.poa_uncertainty_pct / 100.0,
                                  settings.dni_bias_pct / 100.0)


def summarise(
    cube: np.ndarray,
    p0: np.ndarray,
    scopes: Sequence[str],
    label: dict[str, Any],
    settings: Settings,
    temp_refs: tuple[float, float],
    with_ci: bool,
    ac_loss_pct: float | None = None,
) -> dict[str, Any]:
    """One summary row (plant, with an ``inverters`` list) over the days of ``cube``.

    ``cube`` is (n_days, n_scopes, len(ADDITIVE)) daily sums, scope 0 the plant; ``p0`` the
    scopes' P0 [W]; ``temp_refs`` (T_ref, T_cell_typ_avg) [C]; ``label`` the period fields,
    its ``_key`` seeding the bootstrap so a month's interval does not depend on the period.
    ``ac_loss_pct`` (a meter's design AC loss [%]; None: no meter) adds the plant's delivered
    energy and the meter's reconciliation (:func:`reconciliation`).
    """
    s = _sums(cube.sum(axis=0), p0)
    vals = ratios(s, *temp_refs)
    reasons = _reasons(vals, s, settings)
    ci = _gap_bands(s)
    if with_ci and any(r is None for r in reasons):
        rng = np.random.default_rng([settings.seed, *(int(x) for x in label["_key"])])

        def stat(summed: np.ndarray) -> np.ndarray:
            r = ratios(_sums(summed, p0), *temp_refs)
            return np.stack([r[k] for k in BOOTSTRAP_METRICS], axis=-1)

        days = cube[cube[:, 0, ADDITIVE.index("n_used")] > 0]
        low, high = block_bootstrap(days, stat, settings.bootstrap_samples,
                                    settings.confidence, rng)
        u = _uncertainty(s, settings)
        for j, k in enumerate(BOOTSTRAP_METRICS):
            lo, hi = low[:, j], high[:, j]
            ci[k] = combine_band(vals[k], lo, hi, u) if k in IRRADIANCE_METRICS else (lo, hi)
    return _summary_row(s, vals, reasons, ci, scopes, label, ac_loss_pct)


def summarise_days(
    cube: np.ndarray,
    p0: np.ndarray,
    scopes: Sequence[str],
    labels: Sequence[dict[str, Any]],
    settings: Settings,
    temp_refs: tuple[float, float],
    ac_loss_pct: float | None = None,
) -> list[dict[str, Any]]:
    """:func:`summarise` of each day of ``cube`` alone (``labels``: one per day), without
    intervals: the ratios of all days at once, each day's the same to the digit."""
    # a day alone, as summarise sums it over its one day (a sum turns -0.0 into 0.0)
    s = _sums(cube + 0.0, p0)
    vals = ratios(s, *temp_refs)
    bands = _gap_bands(s)
    rows = []
    for d, label in enumerate(labels):
        sd, vd = _at(s, d), _at(vals, d)
        ci = {k: (lo[d], hi[d]) for k, (lo, hi) in bands.items()}
        rows.append(_summary_row(sd, vd, _reasons(vd, sd, settings), ci, scopes, label,
                                 ac_loss_pct))
    return rows


def _at(x: Mapping[str, np.ndarray], d: int) -> dict[str, np.ndarray]:
    return {k: v[d] for k, v in x.items()}


def _gap_bands(s: Mapping[str, np.ndarray]) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """The intervals of :data:`CI_METRICS` before a bootstrap: NaN, and the specific yield's
    band from its data gaps (:func:`gap_band`)."""
    shape = np.shape(s["p0_w"])
    ci = {k: (np.full(shape, np.nan), np.full(shape, np.nan)) for k in CI_METRICS}
    ci["specific_yield_kwh_per_kwp"] = gap_band(s)
    return ci


def _summary_row(s: Mapping[str, np.ndarray], vals: Mapping[str, np.ndarray],
                 reasons: list[str | None], ci: Mapping[str, tuple[np.ndarray, np.ndarray]],
                 scopes: Sequence[str], label: dict[str, Any], ac_loss_pct: float | None
                 ) -> dict[str, Any]:
    """The summary row of :func:`summarise` from its sums, ratios, reasons and intervals."""
    ok = [r is None for r in reasons]
    rows = []
    for i, scope in enumerate(scopes):
        row: dict[str, Any] = {"scope": scope, **_amounts(s, i)}
        for k, v in vals.items():
            row[k] = v[i] if ok[i] or k == "coverage" else None
        for k in CI_METRICS:
            lo, hi = ci[k]
            row[f"{k}_ci_low"] = lo[i] if ok[i] else None
            row[f"{k}_ci_high"] = hi[i] if ok[i] else None
        row["reason"] = reasons[i]
        rows.append(row)
    if ac_loss_pct is not None:
        rows[0]["delivered_kwh"] = s["e_delivered_wh"][0] / 1000.0
        rows[0]["meter"] = reconciliation(s["e_rec_inv_wh"][0], s["e_rec_meter_wh"][0],
                                          ac_loss_pct)
    out = {k: v for k, v in label.items() if not k.startswith("_")}
    out.update(rows[0])
    out["inverters"] = rows[1:]
    for r in out["inverters"]:
        r["days"] = out["days"]
    return json_ready(out)


def reconciliation(inverter_wh: float, meter_wh: float, ac_loss_pct: float) -> dict[str, Any]:
    """The inverters' output against the meter over the intervals that have both: energies
    [kWh], the meter's shortfall in percent of the inverters' output and the design AC loss
    it is to be read against [%] (None where the inverters measured nothing)."""
    diff = 100.0 * (inverter_wh - meter_wh) / inverter_wh if inverter_wh > 0 else None
    return {"inverter_kwh": inverter_wh / 1000.0, "meter_kwh": meter_wh / 1000.0,
            "difference_pct": diff, "expected_ac_loss_pct": ac_loss_pct}


def _amounts(s: Mapping[str, np.ndarray], i: int) -> dict[str, Any]:
    return {
        "measured_kwh": s["e_ledger_meas_wh"][i] / 1000.0,
        "expected_kwh": s["e_ledger_exp_wh"][i] / 1000.0,
        "irradiation_kwh_m2": s["ref_wh"][i] / s["p0_w"][i],
        "daylight_intervals": int(s["n_nominal"][i]),
        "valid_intervals": int(s["n_valid"][i]),
        "used_intervals": int(s["n_used"][i]),
        "excluded_intervals": int(s["n_excluded"][i]),
        "model_poa_intervals": int(s["n_fallback"][i]),
        "model_poa_expected_kwh": s["e_exp_fallback_wh"][i] / 1000.0,
    }


def _reasons(
    vals: Mapping[str, np.ndarray], s: Mapping[str, np.ndarray], settings: Settings
) -> list[str | None]:
    out: list[str | None] = []
    for cov, nominal, ref in zip(vals["coverage"], s["n_nominal"], s["ref_wh"], strict=True):
        if nominal <= 0:
            out.append("no daylight intervals in this period")
        elif not cov >= settings.min_coverage:
            out.append(f"coverage {cov:.3f} of daylight intervals is below the minimum "
                       f"{settings.min_coverage:.2f} (metrics.min_coverage)")
        elif ref <= 0:
            out.append("no plane-of-array irradiation in the used intervals")
        else:
            out.append(None)
    return out


def json_ready(obj: Any) -> Any:
    """NaN to None and floats rounded to 7 significant digits (stable JSON across reruns)."""
    if isinstance(obj, dict):
        return {k: json_ready(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [json_ready(v) for v in obj]
    if isinstance(obj, float | np.floating):
        v = float(obj)
        return None if not math.isfinite(v) else float(f"{v:.7g}")
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


# --------------------------------------------------------------------------------------------
# periods


def load_schema(name: str) -> dict[str, Any]:
    """A JSON Schema shipped in ``perfcheck/schemas`` (e.g. ``check``, ``capacity``)."""
    import importlib.resources

    text = (importlib.resources.files("perfcheck") / "schemas" / f"{name}.schema.json")\
        .read_text(encoding="utf-8")
    return json.loads(text)


def local_iso(ts: pd.Timestamp, site: Site) -> str:
    """ISO 8601 with the site's UTC offset, e.g. 2025-06-01T00:00:00+02:00."""
    return ts.tz_convert(site.tz).isoformat()


def resolve_period(
    con: duckdb.DuckDBPyConnection,
    site: Site,
    date_from: dt.date | None,
    date_to: dt.date | None,
) -> tuple[pd.Timestamp, pd.Timestamp]:
    """[start, end) in UTC from local dates (``date_to`` inclusive); missing ends from the data."""
    if date_from is None or date_to is None:
        try:
            first, last = con.execute(db.sql("metrics_range")).fetchall()[0]
        except duckdb.CatalogException:
            raise DataError("no aligned series in the database; run the model first") from None
        if first is None:
            raise DataError("the aligned series is empty; ingest and model some data first")
        first = pd.Timestamp(first).tz_convert(site.tz)
        last = pd.Timestamp(last).tz_convert(site.tz)
        date_from = date_from or first.date()
        date_to = date_to or last.date()
    return periods.day_period(site, date_from, date_to)


def typical_cell_temperature(
    con: duckdb.DuckDBPyConnection, site: Site, end: pd.Timestamp, settings: Settings
) -> tuple[float, str]:
    """T_cell_typ_avg [C] and where it came from.

    Given in the site file, or the irradiance-weighted mean cell temperature of the 365 days
    before ``end`` (or of all data there if less); the analysis takes ``end`` at the end of the
    whole history, so every view uses the same value. Dierauf et al. 2013,
    NREL/TP-5200-57991, ask for a year of typical weather, modelled for the site; perfcheck
    has no typical-year weather of the site, so without the setting it falls back on the
    site's own data, which the weather-corrected PR then judges, and the source says so.
    """
    if settings.t_cell_typ_avg_c is not None:
        return settings.t_cell_typ_avg_c, "given (metrics.t_cell_typ_avg_c)"
    t, first, last = con.execute(db.sql("metrics_t_cell_typ"), {
        "start": (end - pd.Timedelta(days=365)).to_pydatetime(), "end": end.to_pydatetime(),
    }).fetchall()[0]
    if t is None:
        return 25.0, "no cell temperatures in the data; 25 C used"
    days = (pd.Timestamp(last) - pd.Timestamp(first)) / pd.Timedelta(days=1)
    return float(t), (f"irradiance-weighted mean of {days:.0f} days of the site's own data "
                      "before the end, the data this PR judges, not a typical year: for a "
                      "contract test state metrics.t_cell_typ_avg_c from a typical-year "
                      "simulation of the site")


def compute(
    daily: pd.DataFrame,
    site: Site,
    start: pd.Timestamp,
    end: pd.Timestamp,
    settings: Settings,
    t_typ: tuple[float, str],
    meter_daily: pd.DataFrame | None = None,
    ac_loss_pct: float | None = None,
) -> dict[str, Any]:
    """The ``metrics`` block (monthly, yearly, period, daily) and the ``settings`` used, from
    the per-inverter daily sums of the days of ``[start, end)`` (:func:`daily_sums`).

    ``t_typ`` is T_cell_typ_avg [C] and where it came from (:func:`typical_cell_temperature`).
    ``meter_daily``: the same sums on the meter's basis, behind the plant's figures (None: the
    plant is the sum of its inverters); ``ac_loss_pct``: the meter's design AC loss [%] (None:
    no meter; see :func:`summarise`).
    """
    days, cube, p0, scopes = _cube(daily, site, meter_daily)
    t_typ_c, t_typ_source = t_typ
    temp_refs = _temp_refs(settings, t_typ_c)
    temp_ref = temp_refs[0]
    tz = site.tz

    local_start, local_end = start.tz_convert(tz), end.tz_convert(tz)
    # the local midnights that begin and end the days, put in the zone all at once (one at a
    # time, the daily rows' 2 per day took a tenth of a site-year's check)
    edges = sorted({*days, *(d + dt.timedelta(days=1) for d in days)})
    local = dict(zip(edges, pd.DatetimeIndex(edges).tz_localize(tz), strict=True))

    def midnight(day: dt.date) -> pd.Timestamp:
        return local[day] if day in local else pd.Timestamp(day).tz_localize(tz)

    def bounds(first: dt.date, after: dt.date) -> dict[str, Any]:
        lo = max(midnight(first), local_start)
        hi = min(midnight(after), local_end)
        return {"start": lo.isoformat(), "end": hi.isoformat(),
                "_key": (lo.toordinal(), hi.toordinal()),
                "days": round((hi - lo) / pd.Timedelta(days=1))}

    def group(key: Callable[[dt.date], dt.date], name: str, fmt: Callable[[dt.date], str],
              nxt: Callable[[dt.date], dt.date]) -> list[dict[str, Any]]:
        keys = [key(d) for d in days]
        out, i = [], 0
        while i < len(days):
            j = i
            while j < len(days) and keys[j] == keys[i]:
                j += 1
            label = {name: fmt(keys[i]), **bounds(keys[i], nxt(keys[i]))}
            out.append(summarise(cube[i:j], p0, scopes, label, settings, temp_refs, True,
                                 ac_loss_pct))
            i = j
        return out

    monthly = group(lambda d: d.replace(day=1), "month", lambda d: d.strftime("%Y-%m"),
                    _next_month)
    yearly = group(lambda d: d.replace(month=1, day=1), "year", lambda d: str(d.year),
                   lambda d: d.replace(year=d.year + 1))
    daily_rows = summarise_days(
        cube, p0, scopes, [{"date": d.isoformat(), **bounds(d, d + dt.timedelta(days=1))}
                           for d in days], settings, temp_refs, ac_loss_pct)
    period = _period(cube, p0, scopes, start, end, site, settings, temp_refs, ac_loss_pct)
    return {
        "settings": settings_record(settings, temp_ref, t_typ_c, t_typ_source),
        "metrics": {"monthly": monthly, "yearly": yearly, "period": period, "daily": daily_rows},
    }


def _cube(daily: pd.DataFrame, site: Site, meter_daily: pd.DataFrame | None = None
          ) -> tuple[list[Any], np.ndarray, np.ndarray, list[str]]:
    """Days, the (day, scope, ADDITIVE) cube of daily sums, P0 per scope [W] and the scopes."""
    sums = scope_sums(daily, site, meter_daily)
    scopes = ["plant", *(f"inverter:{i.id}" for i in site.inverters)]
    sums = sums.assign(_order=sums["scope"].map({sc: k for k, sc in enumerate(scopes)}))
    sums = sums.sort_values(["day", "_order"])
    days = list(dict.fromkeys(sums["day"]))
    cube = sums[list(ADDITIVE)].to_numpy(dtype=float).reshape(len(days), len(scopes), -1)
    return days, cube, sums["p0_w"].to_numpy(dtype=float)[: len(scopes)], scopes


def _temp_refs(settings: Settings, t_typ_c: float) -> tuple[float, float]:
    """(T_ref of the temperature-corrected PR, T_cell_typ_avg) [C]."""
    annual = settings.pr_temp_ref_c == "annual"
    return (t_typ_c if annual else float(settings.pr_temp_ref_c), t_typ_c)


def _period(cube: np.ndarray, p0: np.ndarray, scopes: list[str], start: pd.Timestamp,
            end: pd.Timestamp, site: Site, settings: Settings, temp_refs: tuple[float, float],
            ac_loss_pct: float | None = None) -> dict[str, Any]:
    p_start, p_end = start.tz_convert(site.tz), end.tz_convert(site.tz)
    label = {"start": p_start.isoformat(), "end": p_end.isoformat(),
             "_key": (1, p_start.toordinal(), p_end.toordinal()),
             "days": round((p_end - p_start) / pd.Timedelta(days=1))}
    return summarise(cube, p0, scopes, label, settings, temp_refs, True, ac_loss_pct)


def period_summary(daily: pd.DataFrame, site: Site, start: pd.Timestamp, end: pd.Timestamp,
                   settings: Settings, t_typ: tuple[float, str],
                   meter_daily: pd.DataFrame | None = None,
                   ac_loss_pct: float | None = None) -> dict[str, Any]:
    """The ``period`` row of :func:`compute` alone (e.g. a contract year for the guarantees)."""
    _, cube, p0, scopes = _cube(daily, site, meter_daily)
    return _period(cube, p0, scopes, start, end, site, settings, _temp_refs(settings, t_typ[0]),
                   ac_loss_pct)


def period(
    con: duckdb.DuckDBPyConnection,
    site: Site,
    start: pd.Timestamp,
    end: pd.Timestamp,
    windows: pd.DataFrame | None = None,
    settings: Settings | None = None,
    analysis_id: int | None = None,
) -> dict[str, Any]:
    """:func:`compute` straight from the aligned series of ``[start, end)`` (and the ledger of
    ``analysis_id``, if given), with T_cell_typ_avg from the year before ``end``."""
    settings = settings or load_settings(site)
    daily = daily_sums(con, site, start, end, settings, analysis_id, windows)
    return compute(daily, site, start, end, settings,
                   typical_cell_temperature(con, site, end, settings))


def _next_month(d: dt.date) -> dt.date:
    return (d.replace(day=28) + dt.timedelta(days=4)).replace(day=1)


def settings_record(
    settings: Settings, temp_ref_c: float, t_typ: float, t_typ_source: str
) -> dict[str, Any]:
    """The settings as stored with each result (JSON ``settings``, table ``analyses``)."""
    rec = asdict(settings)
    rec["exclude_flags"] = list(settings.exclude_flags)
    rec.update({
        "pr_temp_ref_used_c": temp_ref_c,
        "t_cell_typ_avg_used_c": t_typ,
        "t_cell_typ_avg_source": t_typ_source,
        "g_stc_wm2": G_STC,
        "interval_method": (
            f"day-block bootstrap ({settings.bootstrap_samples} resamples, seed "
            f"{settings.seed}, percentile interval at {settings.confidence:.0%}); for PR, "
            "temperature- and weather-corrected PR and EPI widened in quadrature by the "
            "uncertainty of the irradiation: where the plane-of-array sensor's reading is "
            f"used, its calibration ({settings.poa_uncertainty_pct:g} %, "
            f"{settings.poa_uncertainty_source}); where the irradiance is modelled from the "
            "horizontal reading, that sensor's calibration combined in quadrature with the "
            "error of splitting it into direct and diffuse light (DISC, Maxwell 1987), a "
            f"bias of up to {settings.dni_bias_pct:g} % of the direct normal irradiance over "
            "a month (published validations: Gueymard and Ruiz-Arias 2016, Ineichen 2008), "
            "carried through the transposition to the plane interval by interval, so it is "
            "small for a fixed plane in summer and large for a tracker in a high-latitude "
            "winter; plus, with the sun within about 4 degrees of the horizon, where the "
            "split cuts the direct light, the whole range the plane's irradiance can take "
            "between no direct light and the clear-sky direct light"
        ),
        "rules": rules(settings),
    })
    return json_ready(rec)


def rules(settings: Settings) -> list[str]:
    """The filtering rules in words a person reads, with the values of ``settings``."""
    flags = ", ".join(f.replace("_", " ") for f in settings.exclude_flags) or "none"
    curtail = "left out" if settings.exclude_curtailment else "kept in"
    grid = ("left out as grid outages" if settings.exclude_grid_outages else
            "kept in (a grid outage cannot be told from a plant stop by power data alone)")
    return [
        "daylight: the sun above the horizon at the interval's centre",
        "valid: measured power, expected power and plane-of-array irradiance present, and no "
        f"quality flag of these kinds: {flags}",
        "used for the yields, PR and EPI: daylight, valid, outside the windows left out, "
        f"irradiance at least {settings.min_poa_wm2:g} W/m2",
        "availability: over daylight, valid intervals outside the windows left out with "
        f"irradiance at least {settings.availability_min_poa_wm2:g} W/m2; an inverter is down "
        "in the intervals of the outage events found",
        f"curtailment events: {curtail} the yields, PR, EPI and availability; plant-wide "
        f"outages: {grid}",
        "irradiance-sensor faults: the modelled plane-of-array irradiance replaces the "
        "sensor's for the reference yield, with the uncertainty of the modelled irradiance, "
        "and the expected power; the intervals and energy concerned are reported",
        "coverage: valid daylight intervals over the calendar's daylight intervals; below "
        f"{settings.min_coverage:.0%} a value is left out, with the reason",
        "plant reference yield: the mean of the inverters' plane-of-array irradiation, "
        "weighted by their DC power",
    ]


# --------------------------------------------------------------------------------------------
# the whole check document


def event_windows(events: Sequence[Mapping[str, Any]], settings: Settings) -> pd.DataFrame:
    """Windows the metrics treat specially, from detected events (:mod:`perfcheck.kinds`).

    action 'exclude': kinds whose metrics treatment is ``exclude`` when their setting is on
    (curtailment with ``exclude_curtailment``; outages with ``exclude_grid_outages``, and then
    only plant-wide ones, taken as grid outages: from power data alone a grid outage cannot be
    told from a plant-wide stop, so turn it on where the grid operator confirms them).
    action 'model_poa': sensor faults if ``sensor_fault_fallback``; there the reference yield
    uses the modelled plane-of-array irradiance (with the modelled-irradiance uncertainty) and
    the expected power the one computed from it.
    """
    keep = []
    for ev in events:
        k = kinds.get(ev["kind"])
        if k.metrics not in ("exclude", "model_poa") or not getattr(settings, k.metrics_setting):
            continue
        if k.name == "outage" and ev["scope"] != "plant":
            continue
        keep.append((k.metrics, ev["scope"], pd.Timestamp(ev["start"]).tz_convert("UTC"),
                     pd.Timestamp(ev["end"]).tz_convert("UTC")))
    return pd.DataFrame(keep, columns=["action", "scope", "start_ts", "end_ts"])


def site_record(site: Site) -> dict[str, Any]:
    return {
        "name": site.name,
        "site_file": site.path.name,
        "latitude_deg": site.latitude_deg,
        "longitude_deg": site.longitude_deg,
        "timezone": site.timezone,
        "dc_kwp": site.dc_kwp,
        "ac_kw": site.ac_kw,
        "inverters": [{"id": i.id, "dc_kwp": i.dc_kwp, "ac_kw": i.ac_kw} for i in site.inverters],
    }


def run_record() -> dict[str, Any]:
    import importlib.metadata
    import platform

    return {
        "tool_version": __version__,
        "created_at": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "python": platform.python_version(),
        # pvlib's and statsmodels' versions as they read them, from their metadata: a view
        # need not import them
        "dependencies": {"pandas": pd.__version__, "numpy": np.__version__,
                         "pvlib": importlib.metadata.version("pvlib"),
                         "duckdb": duckdb.__version__,
                         "statsmodels": importlib.metadata.version("statsmodels")},
    }
