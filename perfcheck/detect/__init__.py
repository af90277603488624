"""Detect stage: find the underperformance in the aligned series and cost it.

:func:`analyse` (pure, no database) runs every detector over the aligned rows of the plant's
whole history and returns the events, the loss ledger (:mod:`perfcheck.detect.attribution`)
and the degradation block; :mod:`perfcheck.analysis` stores them and every view reads them.

Order of the work (each step sees the corrections of the steps before):
clock faults (readings shifted back) -> sensor faults (the expected power of the sensor-fed
inverters rebuilt from modelled POA where the sensor is suspect) -> wind stow of trackers (in
the expected series by design) -> outages -> clipping -> curtailment -> tracker stalls and
rows out of step -> partial outages -> shading (without the days of a tracker fault) ->
soiling -> degradation -> baseline regression and CUSUM -> ledger
(:mod:`perfcheck.detect.attribution` documents the order of the losses).

Settings (optional ``[detect]`` table of the site file):

``reference_from`` (date, default: the first day with data on or after commissioning) and
``reference_days`` (int, 28): the baseline regression's reference window;
``alpha`` (1e-3): significance of every statistical test of the detectors (change points, level
tests, the sky-region test of shading; false-alarm probability per test);
``cusum_k`` (0.5) and ``cusum_h`` (5.5): the CUSUM's reference value and decision
interval in standard deviations; ``soiling_rain_mm`` (5.0): daily rain that counts as a
recovery candidate; ``clock_min_offset_min`` (20): smallest clock offset reported;
``shading_min_deficit`` (0.05): smallest beam deficit of a shaded sky bin.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import time
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from perfcheck import physics as ph
from perfcheck.detect.common import (
    MODEL_FLOOR,
    Z95,
    Event,
    Footprint,
    Wide,
    clear_days,
    clearsky_poa,
    daily_pi,
    daylight,
    ratio_noise,
    robust_sigma,
    shares_put_back,
    wide,
)
from perfcheck.lazy import lazy_module
from perfcheck.model import (
    WEATHER,
    in_sensor_plane,
    orientation,
    sensor_array,
    sensor_orientation,
)
from perfcheck.site import Site, Table

# The detectors run only when an analysis is made: the commands that read a stored one
# (report, evidence, check) take this package's events and settings without loading them.
attribution = lazy_module("perfcheck.detect.attribution")
baseline = lazy_module("perfcheck.detect.baseline")
clipping = lazy_module("perfcheck.detect.clipping")
clock = lazy_module("perfcheck.detect.clock")
curtailment = lazy_module("perfcheck.detect.curtailment")
degradation = lazy_module("perfcheck.detect.degradation")
outage = lazy_module("perfcheck.detect.outage")
partial = lazy_module("perfcheck.detect.partial")
sensor = lazy_module("perfcheck.detect.sensor")
shading = lazy_module("perfcheck.detect.shading")
soiling = lazy_module("perfcheck.detect.soiling")
tracker = lazy_module("perfcheck.detect.tracker")

# The aligned columns (perfcheck.align.ALIGNED_COLUMNS) that the detectors read
# (:func:`perfcheck.detect.common.wide`, the site series of :func:`analyse`).
COLUMNS = (
    "ts", "inverter_id", "interval_s", "measured_ac_w", "expected_ac_w", "potential_ac_w",
    "poa_wm2", "poa_modelled_wm2", "poa_source", "ghi_wm2", "clearsky_ghi_wm2", "temp_air_c",
    "wind_speed_ms", "temp_module_c", "temp_cell_c", "rain_mm", "sun_zenith_deg",
    "sun_azimuth_deg", "flags", "expected_ac_modelled_w", "potential_ac_modelled_w",
    "poa_sensor_wm2",
)


@dataclasses.dataclass(frozen=True)
class Settings:
    reference_from: dt.date | None = None
    reference_days: int = 28
    alpha: float = 1e-3
    cusum_k: float = 0.5
    cusum_h: float = 5.5
    soiling_rain_mm: float = 5.0
    clock_min_offset_min: float = 20.0
    shading_min_deficit: float = 0.05


def load_settings(site: Site) -> Settings:
    """The ``[detect]`` table of the site file, validated (errors name the key)."""
    t = Table(site.raw.get("detect", {}), "detect", site.path)
    d = Settings()
    s = Settings(
        reference_from=t.get("reference_from", dt.date, None),
        reference_days=t.get("reference_days", int, d.reference_days),
        alpha=t.number("alpha", d.alpha, lo=1e-9, hi=0.1),
        cusum_k=t.number("cusum_k", d.cusum_k, lo=0.0, hi=5.0),
        cusum_h=t.number("cusum_h", d.cusum_h, lo=0.5, hi=50.0),
        soiling_rain_mm=t.number("soiling_rain_mm", d.soiling_rain_mm, lo=0.0, hi=500.0),
        clock_min_offset_min=t.number("clock_min_offset_min", d.clock_min_offset_min,
                                      lo=1.0, hi=720.0),
        shading_min_deficit=t.number("shading_min_deficit", d.shading_min_deficit,
                                     lo=0.001, hi=1.0),
    )
    if s.reference_days < 7:
        raise t._err("reference_days", f"{s.reference_days} is too short (at least 7 days)")
    t.done()
    return s


def _planes(site: Site, w: Wide) -> dict[str, list[tuple[Any, Any, float]]]:
    """Each inverter's planes (tilt, azimuth: constants, or arrays for a tracker) and the
    sensor's, with their weights, on the rows of ``w``."""
    sun = pd.DataFrame({"apparent_zenith": w.zenith, "azimuth": w.azimuth}, index=w.index)

    def plane(tilt: Any, azimuth: Any) -> tuple[Any, Any]:
        return tuple(np.asarray(v, dtype=float) if isinstance(v, pd.Series) else v
                     for v in (tilt, azimuth))

    out = {inv.id: [(*plane(*orientation(a, sun)), a.dc_kwp / inv.dc_kwp) for a in inv.arrays]
           for inv in site.inverters}
    out["_sensor"] = [(*plane(*sensor_orientation(site, sun)), 1.0)]
    return out


def _model_sigma(pi: pd.DataFrame) -> float:
    """Relative standard error of a day's expected energy: robust scale of daily log PI
    (``pi``: :func:`daily_pi`), at least ``MODEL_FLOOR``."""
    s = [robust_sigma(np.log(pi[c].where(pi[c] > 0)).dropna().to_numpy()) for c in pi]
    s = [v for v in s if np.isfinite(v)]
    return max(float(np.median(s)) if s else 0.05, MODEL_FLOOR)


def analyse(df: pd.DataFrame, site: Site, settings: Settings | None = None,
            timings: dict[str, float] | None = None,
            reported: pd.DataFrame | None = None,
            angle: pd.Series | None = None,
            weather: Callable[[pd.Timestamp, pd.Timestamp], pd.DataFrame] | None = None
            ) -> dict[str, Any]:
    """Run every detector over aligned rows; pure (no database). ``reported``: the states the
    status channels reported (:func:`perfcheck.status.reported`), if any; ``angle``: the
    ``tracker_angle`` channel [deg] on UTC interval starts, if any; ``weather``: the site
    weather the model took between two instants (:func:`perfcheck.analysis.model_weather`),
    to run it again inside a clock fault's window (:func:`perfcheck.detect.clock.corrected`).

    Returns ``{"events": [Event], "ledger": Ledger, "degradation": {...}, "model": {...},
    "suspect_windows": [...], "clock_shifts": [...], "footprints": [...], "wide": Wide}``
    (events as :class:`Event`, their energies still the detectors' own: the analysis restates
    them from the ledger; ``wide`` is the corrected series the detectors saw).
    """
    st = settings or load_settings(site)
    clock_t = timings if timings is not None else {}

    def lap(name: str, t0: float) -> float:
        t1 = time.perf_counter()
        clock_t[name] = clock_t.get(name, 0.0) + t1 - t0
        return t1

    t = time.perf_counter()
    ac = {i.id: i.ac_kw * 1000.0 for i in site.inverters}
    limit = None if site.export_limit_kw is None else site.export_limit_kw * 1000.0
    w0 = wide(df, ac, limit, site.tz)
    *temps, reading = _site_series(df, (*HEAT_COLUMNS, "poa_sensor_wm2"), w0)
    del df  # the caller's rows are the one copy left (analysis.update keeps none)
    planes = _planes(site, w0)
    cs = clearsky_poa(w0, site.latitude_deg, site.longitude_deg, site.altitude_m, planes)
    clear = clear_days(w0, cs[w0.inverters])
    t = lap("prepare", t)
    lg = clock.loggers(site)
    shifts = clock.find(w0, cs[w0.inverters], lg, alpha=st.alpha,
                        min_offset_min=st.clock_min_offset_min)
    w1 = clock.corrected(w0, shifts, lg, site, weather)
    # the sensor's own reading on the corrected clock, as the series it is compared with
    reading = clock.moved_back(reading, w0, shifts, lg.poa)
    heat, wind = _module_heat_and_wind(temps, site, w0, shifts, lg)
    del temps
    events: list[Event] = clock.events(w0, w1, shifts, lg, len(site.inverters))
    t = lap("clock", t)
    suspects = sensor.find(w1, clear, cs, alpha=st.alpha, heat=heat, reading=reading,
                           shares=_sensor_shares(site))
    w = sensor.corrected(w1, suspects)
    events += sensor.events(w1, w, suspects)
    del w0, w1  # the series before the repairs
    t = lap("sensor", t)
    sky = tracker.sky(w) if tracker.tracker_arrays(site) else None
    w, stowed, design_stow = tracker.stow(w, site, wind, sky, st.alpha)
    events += stowed

    valid = daylight(w) & ~w.flagged & w.expected.notna()
    levels = daily_pi(w, valid)
    rel_sigma = _model_sigma(levels)
    step_noise, spread = ratio_noise(w, valid)
    ev, out_mask = outage.detect(w, rel_sigma, reported=reported)
    events += ev
    t = lap("outage", t)
    ev, clip_mask, design = clipping.detect(w, rel_sigma, step_noise, out_mask, spread,
                                             st.alpha)
    design.update(design_stow)
    events += ev
    t = lap("clipping", t)
    ev, curt_mask = curtailment.detect(w, rel_sigma, step_noise, spread, out_mask | clip_mask,
                                       alpha=st.alpha)
    events += ev
    t = lap("curtailment", t)
    excluded = out_mask | clip_mask | curt_mask
    unclipped = w.potential.lt(w.ac_w * 0.98, axis=1)
    usable = valid & ~excluded & unclipped & w.expected.ge(w.ac_w * 0.2, axis=1)
    ev, prints = tracker.detect(w, site, usable, rel_sigma, st.alpha, angle, sky)
    events += ev
    # shading reads each day's shape against the day's own level: on the days of a tracker
    # fault that shape is the tracker model's (its footprint put back), whose error is a shape
    # too, so those days are left out of the shading tests
    tracker_days = _days_of(w, prints)
    t = lap("tracker", t)
    strings = {i.id: sum(a.strings for a in i.arrays) for i in site.inverters}
    # lost strings are judged on the power with the rows' share put back: during a stall they
    # are a level on top of its shape (the ledger takes the shares in this order)
    w_rows = dataclasses.replace(w, measured=shares_put_back(w, prints))
    # the edges of lost strings are placed on every daylight interval not explained: a flag
    # on a weather reading (a stuck anemometer) leaves the power's step visible
    ev, fp = partial.detect(w_rows, usable, strings, alpha=st.alpha,
                            judged=daylight(w) & w.expected.notna() & ~excluded)
    events += ev
    prints += fp
    t = lap("partial", t)
    undone = list(prints)  # the findings whose share the measured power gets back
    meas_fixed = shares_put_back(w, undone)
    w_fixed = dataclasses.replace(w, measured=meas_fixed)
    horizon = {i.id: i.arrays[0].horizon for i in site.inverters}
    ev, fp, shaded = shading.detect(w_fixed, valid & ~excluded & ~tracker_days, rel_sigma,
                                    horizon, cs[w.inverters], alpha=st.alpha,
                                    min_deficit=st.shading_min_deficit)
    events += ev
    prints += fp
    t = lap("shading", t)
    # the slow statistics leave out the windows whose data were repaired (sensor, clock)
    repaired = _in_windows(w.index, [(x.start, x.end) for x in suspects]
                           + [(x.start, x.end) for x in shifts])
    keep = valid & ~excluded & ~shaded & ~repaired[:, None]
    pi = degradation.ageing_removed(daily_pi(w_fixed, keep),
                                    _plant_pi(w, keep, w_fixed.measured))
    ev, fp, soil_ratio, soil_limit = soiling.detect(
        w_fixed, pi, rel_sigma, rain_mm=st.soiling_rain_mm, alpha=st.alpha, undone=undone,
        repaired=pd.DatetimeIndex(np.unique(w.day.to_numpy()[repaired])))
    events += ev
    prints += fp
    t = lap("soiling", t)
    ratio_iv = soil_ratio.reindex(w.day.to_numpy()).fillna(1.0).to_numpy()
    m_clean = w_fixed.measured.div(ratio_iv, axis=0)
    pi_plant = _plant_pi(w, keep, m_clean)
    block, ev, fp = degradation.detect(w, pi_plant, site.losses.degradation_pct_per_year,
                                       pd.Timestamp(site.commissioned), rel_sigma, site.model)
    events += ev
    prints += fp
    t = lap("degradation", t)
    ref_first = _reference_start(w, site, st)
    fits = baseline.fit(w, valid & ~excluded, ref_first, st.reference_days)
    flagged, info = baseline.flag(w, valid, fits, k=st.cusum_k, h=st.cusum_h)
    t = lap("baseline", t)
    ledger, under = attribution.build(
        w, events, {"outage": out_mask, "clipping": clip_mask, "curtailment": curt_mask},
        prints, design, flagged, rel_sigma, _absolute_rel(site), repaired)
    events += under
    lap("attribution", t)
    model = {
        "model_relative_sigma_daily": rel_sigma,
        "soiling_detection_limit": soil_limit,
        "baseline": {
            "reference_from": ref_first.date().isoformat(),
            "reference_days": st.reference_days, "cusum_k": st.cusum_k, "cusum_h": st.cusum_h,
            "arl0_days": baseline.arl0(st.cusum_k, st.cusum_h),
            "false_alarms_per_inverter_year": 365.25 / baseline.arl0(st.cusum_k, st.cusum_h),
            "flagged_periods": len(flagged),
            "fits": {k: {"params": v["params"], "rows": v["rows"]} for k, v in fits.items()},
            "per_inverter": info}}
    events.sort(key=lambda e: (e.start, e.kind, e.scope))
    return {"events": events, "ledger": ledger, "degradation": block, "model": model,
            "suspect_windows": suspects, "clock_shifts": shifts, "footprints": prints,
            "wide": w}


def _absolute_rel(site: Site) -> tuple[float, float]:
    """Relative standard uncertainty of the expected power's absolute level [-], where it
    comes from the plane-of-array sensor (its calibration, ``[model] poa_uncertainty_pct``
    or its class) and where from modelled irradiance (``[metrics]
    modelled_poa_uncertainty_pct``): the expanded 95 % values over 1.96."""
    from perfcheck import metrics

    m = metrics.load_settings(site)
    return m.poa_uncertainty_pct / 100 / Z95, m.modelled_poa_uncertainty_pct / 100 / Z95


def _site_series(df: pd.DataFrame, columns: tuple[str, ...], w: Wide
                 ) -> list[pd.Series | None]:
    """Site-wide columns of the aligned rows (each instant's first row) on the wide index;
    None for a column that is absent."""
    first = ~df["ts"].duplicated().to_numpy()
    index = pd.DatetimeIndex(df["ts"])[first].tz_convert("UTC")
    return [pd.Series(pd.to_numeric(df[c], errors="coerce").to_numpy(dtype=float)[first],
                      index=index).reindex(w.index) if c in df else None for c in columns]


def _sensor_shares(site: Site) -> pd.Series | None:
    """Per inverter, the share of its DC rating in arrays whose plane irradiance is the POA
    sensor's reading (None where the site's model takes the irradiance from GHI alone)."""
    if site.model.irradiance_source == "ghi":
        return None
    return pd.Series({i.id: sum(a.dc_kwp for a in i.arrays if in_sensor_plane(a, site))
                      / i.dc_kwp for i in site.inverters}, dtype=float)


# the site columns the module-temperature reference is built from (the wind last)
HEAT_COLUMNS = ("temp_module_c", "temp_air_c", "wind_speed_ms")


def _module_heat_and_wind(series: list[pd.Series | None], site: Site, w: Wide,
                          shifts: list[clock.Shift], lg: clock.Loggers
                          ) -> tuple[pd.Series | None, pd.Series | None]:
    """The irradiance [W/m^2] the logged module temperature implies (SAPM eq. 11 with the
    coefficients of the array carrying the sensor), None without a module temperature; and
    the logged wind speed [m/s] (None without one). ``series`` are the site columns of
    :data:`HEAT_COLUMNS`, each moved back by the clock shifts of its logger as the wide series
    are (:func:`perfcheck.detect.clock.moved_back`): a reference on a shifted clock would
    step against the corrected sensor."""
    series = [clock.moved_back(x, w, shifts, lg.weather.get(WEATHER[c]))
              for x, c in zip(series, HEAT_COLUMNS, strict=True)]
    wind = series[-1]
    if any(x is None or x.notna().sum() == 0 for x in series):
        return None, wind
    array = sensor_array(site)
    a, b, _ = ph.sapm_parameters(array.mounting, array.construction)
    return ph.poa_from_module_temperature(*series, a, b), wind


def _in_windows(index: pd.DatetimeIndex, windows: list[tuple[pd.Timestamp, pd.Timestamp]]
                ) -> np.ndarray:
    out = np.zeros(len(index), dtype=bool)
    for a, b in windows:
        out |= (index >= a) & (index < b)
    return out


def _days_of(w: Wide, prints: list[Footprint]) -> pd.DataFrame:
    """Per inverter, the rows of the site-local days that a footprint of ``prints`` touches."""
    out = pd.DataFrame(False, index=w.index, columns=w.inverters)
    days = w.day.to_numpy()
    for fp in prints:
        touched = np.isin(days, np.unique(days[fp.lo:fp.hi]))
        for c in fp.cols:
            out[c] |= touched
    return out


def _plant_pi(w: Wide, keep: pd.DataFrame, measured: pd.DataFrame) -> pd.Series:
    """Daily plant index sum(measured) / sum(expected) over the kept intervals."""
    days = w.day.to_numpy()
    m = measured.where(keep).sum(axis=1, min_count=1).groupby(days).sum(min_count=1)
    e = w.expected.where(keep & measured.notna()).sum(axis=1, min_count=1).groupby(days).sum(
        min_count=1)
    pi = m / e
    return pi.where(e >= 0.25 * e.median())


def _reference_start(w: Wide, site: Site, st: Settings) -> pd.Timestamp:
    first = pd.Timestamp(w.day.iloc[0])
    if st.reference_from is not None:
        return pd.Timestamp(st.reference_from)
    return max(first, pd.Timestamp(site.commissioned))
