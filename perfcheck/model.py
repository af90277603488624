"""The expected series: from site weather and design to expected DC and AC power per inverter.

Stage "model". The physics lives in :mod:`perfcheck.physics`; this module chooses the irradiance
source, runs the chain per array and inverter (:func:`expected_power`, pure), and stores the
result (:func:`run`, the only function here that touches DuckDB).

Choices (all from the site file, ``[model]`` and ``[losses]``):

* Sun position once per site and time axis, at interval mid-points (see
  :func:`perfcheck.physics.interval_midpoints`), shared by every inverter and with the quality
  stage of the same command (:class:`perfcheck.physics.SunPositions`).
* Irradiance source ``auto`` uses the plane-of-array sensor where one is logged, else GHI.
  The sensor plane defaults to the first array's plane. An array in the sensor's plane takes the
  sensor's reading (``poa_source = 'sensor'``; in ``auto`` intervals without a reading fall back
  to the model); an array in another plane, when GHI is logged, takes the sensor's reading
  times the modelled ratio of its plane's POA to the sensor plane's (both transposed from GHI
  + DHI/DNI where measured) in the intervals where that ratio depends less on the
  decomposition's split of GHI than its own transposed POA does, and that POA in the others
  (``poa_source = 'translated'`` where every array of an inverter follows the sensor so; not
  from a sensor on a tracker, nor where an inverter has arrays in and out of the sensor's
  plane: :func:`translatable`); without GHI it is transposed from the components that explain
  the sensor's reading (GTI-DIRINT, Marion 2015), i.e. decomposed and transposed again. The
  modelled POA is kept beside the sensor's, and their daily ratio is summarised in the run's
  checks.
* Beside the expected series from the irradiance used, the same chain is run from the
  modelled POA alone (``ac_modelled_w``, ``ac_potential_modelled_w``, and the cell
  temperature ``temp_cell_modelled_c``, which depends on the POA unless a module temperature
  is logged): equal to the normal series for arrays the sensor does not feed, and the
  stand-in where the sensor is suspect (the metrics use it inside detected sensor-fault
  windows). Where no GHI is logged the modelled POA itself comes from the sensor (GTI-DIRINT),
  so it cannot stand in for a faulty sensor there.
* Beside the modelled POA, its sensitivity to the decomposition's error
  (``poa_dni_sensitivity_wm2``) and its range over the beam cut at low sun
  (``poa_beam_range_wm2``), both by :func:`perfcheck.physics.poa_decomposition_terms` and
  zero where DNI or DHI is measured (not computed there): the metrics turn them into the
  modelled irradiance's uncertainty.
* A single-axis tracker array's plane moves (:func:`orientation`, pvlib's tracking with
  backtracking, flat at night); a POA sensor on a tracker (``poa_sensor_on_tracker``) moves
  with the first tracker array, and feeds the arrays on the same tracker. Bifacial arrays add
  the rear irradiance (a rear sensor beside the POA sensor where logged, else the
  infinite-sheds model) to the effective irradiance at their bifaciality; cell temperature
  follows the front irradiance. A tracker angle channel is stored, not used by the model
  (the expected series follows the tracker as designed, not as it turned).
* Incidence-angle losses apply to modelled irradiance and to a pyranometer's reading (scaled by
  the modelled ratio of effective to total POA); a reference cell's reading is taken as the
  effective irradiance.
* What the module's datasheet states about its response, per array: its cell technology
  (``technology``) scales the effective irradiance by that technology's spectral factor at the
  interval's air mass and the site's precipitable water (Lee & Panchula 2016; a reference
  cell's reading by the module's factor over a silicon cell's, :func:`spectral_factors`), and
  its efficiency loss at 200 W/m^2 (``low_light_loss_pct``) sets a logarithmic fall of the
  efficiency below 1000 W/m^2 (:func:`perfcheck.physics.relative_efficiency_low_light`). Neither
  stated: neither applies (the linear model of Dobos 2014 alone).
* Cell temperature: a logged back-of-module temperature applies to every array (the site
  file maps one per site); intervals without it, and sites without one, use the site's
  ``temperature_model`` (SAPM by mounting and construction, or Faiman) from ambient
  temperature, wind (1 m/s where none is logged) and the array's POA.
* Intervals: the model runs at the interval of the loggers that record inverter power (the
  shortest, if several); finer weather readings are averaged into it, coarser ones held over
  their own interval (:func:`hold_coarse_weather`).
* Long spans are computed in pieces of whole days (bounded memory), each stored at once beside
  the measured power (:func:`perfcheck.align.store`); only intervals touched by new readings
  are recomputed while the parameters stay the same (``model_runs``, keyed by the hash of
  :func:`parameters`), everything when they change.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import hashlib
import json
from collections.abc import Callable
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import align, db, ingest, quality
from perfcheck import physics as ph
from perfcheck.errors import DataError
from perfcheck.lazy import PVLIB_WITH_INIT, lazy_package
from perfcheck.site import DEVICE_QUANTITIES, QUANTITIES, Array, Inverter, Site
from perfcheck.versions import versions

# loaded when a model is built, not when a detector names it
pvlib = lazy_package("pvlib", PVLIB_WITH_INIT)

# Bump when a change of the code changes the expected series: cached runs are then not reused.
MODEL_VERSION = "11"
DEFAULT_WIND_SPEED = 1.0  # [m/s] where no wind is logged (common practice, no source)
WIND_GAP_BRIDGED_S = 3600  # wind gaps up to this long are interpolated (common practice)
PLANE_TOLERANCE_DEG = 1.0  # an array is "in the sensor's plane" within this tilt/azimuth

# weather stored beside the sun in the expected rows, as the model used it: stored name ->
# name in the weather frame (the POA sensor's own reading under a name of its own, apart from
# each inverter's plane irradiance; from MODEL_VERSION 7)
CONDITIONS = {"ghi_wm2": "ghi", "temp_air_c": "temp_air", "wind_speed_ms": "wind_speed",
              "temp_module_c": "temp_module", "rain_mm": "rain", "poa_sensor_wm2": "poa_sensor"}
# the aligned rows' names of the expected series' columns (perfcheck.align.ALIGNED_COLUMNS)
ALIGNED_NAMES = {"ac_w": "expected_ac_w", "ac_potential_w": "potential_ac_w",
                 "dc_w": "expected_dc_w", "poa_global_wm2": "poa_wm2",
                 "ac_modelled_w": "expected_ac_modelled_w",
                 "ac_potential_modelled_w": "potential_ac_modelled_w"}
# Stored names of the quantities that belong to an inverter or the plant (power, energy).
DEVICE_STORED = tuple(QUANTITIES[q][0] for q in DEVICE_QUANTITIES)
# readings quantity -> pvlib name in the weather frame
WEATHER = {
    "ghi_wm2": "ghi",
    "dhi_wm2": "dhi",
    "dni_wm2": "dni",
    "poa_wm2": "poa_sensor",
    "poa_rear_wm2": "poa_rear_sensor",
    "temp_air_c": "temp_air",
    "temp_module_c": "temp_module",
    "wind_speed_ms": "wind_speed",
    "rain_mm": "rain",
}


# --------------------------------------------------------------------------------------------
# parameters


def interval_s(intervals: dict[tuple[str, str], int]) -> int:
    """The model's interval [s]: the shortest interval of the channels of inverter or plant
    power and energy (of all channels if there is none). ``intervals``: [s] per (quantity,
    device), as stored at ingest (:func:`perfcheck.ingest.channel_intervals`)."""
    power = [s for (q, _d), s in intervals.items() if q in DEVICE_STORED]
    return min(power or intervals.values())


def weather_intervals(intervals: dict[tuple[str, str], int]) -> dict[str, int]:
    """Logging interval [s] of each site-weather quantity (pvlib names), from the stored
    intervals (see :func:`interval_s`)."""
    return {WEATHER[q]: s for (q, d), s in intervals.items() if d == "site" and q in WEATHER}


def hold_coarse_weather(weather: pd.DataFrame, step_s: int, intervals: dict[str, int]
                        ) -> pd.DataFrame:
    """Weather logged at a longer interval than the model's, held over its own interval.

    A mean over a logger interval applies to each model interval inside it (a 10-minute mean
    starting at 12:00 also stands for 12:05 in a 5-minute model). Rain, a sum per interval, is
    not held (the daily sums stay right). Readings finer than the model were averaged already.
    """
    coarse = {c: iv // step_s for c, iv in intervals.items()
              if iv > step_s and c in weather and c != "rain"}
    if not coarse or weather.empty:
        return weather
    full = weather.asfreq(pd.Timedelta(seconds=step_s))
    for c, k in coarse.items():
        full[c] = full[c].ffill(limit=k - 1)
    return full.dropna(how="all")


def parameters(site: Site, step_s: int) -> dict[str, Any]:
    """Everything that determines the expected series, as plain JSON-able values; ``step_s``
    is the model's interval (:func:`interval_s`)."""
    return {
        "model_version": MODEL_VERSION,
        "latitude_deg": site.latitude_deg,
        "longitude_deg": site.longitude_deg,
        "altitude_m": site.altitude_m,
        "commissioned": site.commissioned.isoformat(),
        "export_limit_kw": site.export_limit_kw,
        "interval_s": step_s,
        "inverters": [dataclasses.asdict(inv) for inv in site.inverters],
        "losses": dataclasses.asdict(site.losses),
        "model": dataclasses.asdict(site.model),
        "defaults": {"wind_speed_ms": DEFAULT_WIND_SPEED, "inverter_eta_ref": 0.9637,
                     "sapm_substitutes": ph.SAPM_SUBSTITUTES},
        "pvlib": pvlib.__version__,
    }


def parameters_hash(params: dict[str, Any]) -> str:
    """SHA-256 of the parameters' canonical JSON."""
    text = json.dumps(params, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def sensor_plane(site: Site) -> tuple[float, float]:
    """(tilt, azimuth) of the plane-of-array sensor [deg]: as configured, else the first array's.

    A sensor on a tracker (``poa_sensor_on_tracker``) moves: this is then its tracker's plane
    when flat; :func:`sensor_orientation` gives the plane it has at each instant.
    """
    first = sensor_array(site) if site.model.poa_sensor_on_tracker \
        else site.inverters[0].arrays[0]
    m = site.model
    tilt = first.tilt_deg if m.poa_sensor_tilt_deg is None else m.poa_sensor_tilt_deg
    az = first.azimuth_deg if m.poa_sensor_azimuth_deg is None else m.poa_sensor_azimuth_deg
    return tilt, az


def sensor_array(site: Site) -> Array:
    """The array the sensor is taken to sit on (its albedo and horizon are the sensor's).

    A sensor on a tracker: the first tracker array. Else the first fixed array in the sensor's
    plane, else the first array.
    """
    arrays = [a for inv in site.inverters for a in inv.arrays]
    if site.model.poa_sensor_on_tracker:
        return next(a for a in arrays if a.tracker is not None)
    return next((a for a in arrays if a.tracker is None and in_plane(a, sensor_plane(site))),
                arrays[0])


def in_plane(array: Array, plane: tuple[float, float]) -> bool:
    """True when the array lies in ``plane`` (tilt, azimuth) within PLANE_TOLERANCE_DEG."""
    d_az = abs((array.azimuth_deg - plane[1] + 180.0) % 360.0 - 180.0)
    flat = array.tilt_deg < PLANE_TOLERANCE_DEG and plane[0] < PLANE_TOLERANCE_DEG
    return abs(array.tilt_deg - plane[0]) <= PLANE_TOLERANCE_DEG and (d_az <= PLANE_TOLERANCE_DEG
                                                                      or flat)


def in_sensor_plane(array: Array, site: Site) -> bool:
    """True when the sensor sees the array's plane: a fixed array in a fixed sensor's plane,
    or a tracker array that turns as the sensor's tracker does (same axis, limits, backtracking
    and ground coverage ratio)."""
    if site.model.poa_sensor_on_tracker:
        twin = sensor_array(site)
        return array.tracker is not None and (array.tracker, array.gcr) == (twin.tracker,
                                                                            twin.gcr)
    return array.tracker is None and in_plane(array, sensor_plane(site))


def translatable(site: Site, weather: pd.DataFrame) -> bool:
    """Whether an array in another plane than the sensor's takes the sensor's reading
    translated to its plane (:func:`perfcheck.physics.poa_translated`): where GHI is logged
    (without it the other planes are already transposed from the components that explain the
    sensor's reading), the sensor is fixed (one on a tracker leaves the design's plane when
    its tracker stows or stalls, and the translation would carry that to other planes), and
    no inverter has arrays both in the sensor's plane and in another (east and west halves,
    say): the sensor-fault detector takes such an inverter's dependence on the sensor from
    the design's share in its plane (:func:`in_sensor_plane`) and the inverters off its plane
    as the reference apart from it, which the reading carried to the other planes would
    blur."""
    if site.model.poa_sensor_on_tracker or "ghi" not in weather or weather["ghi"].isna().all():
        return False
    return all(len({in_sensor_plane(a, site) for a in inv.arrays}) == 1
               for inv in site.inverters)


def orientation(array: Array, sun: pd.DataFrame
                ) -> tuple[float | pd.Series, float | pd.Series]:
    """(surface_tilt, surface_azimuth) of an array [deg]: constants for a fixed array, Series
    for a tracker (:func:`perfcheck.physics.singleaxis`)."""
    t = array.tracker
    if t is None:
        return array.tilt_deg, array.azimuth_deg
    plane = ph.singleaxis(sun, t.axis_tilt_deg, t.axis_azimuth_deg, t.max_angle_deg,
                          t.backtrack, array.gcr)
    return plane["surface_tilt"], plane["surface_azimuth"]


def sensor_orientation(site: Site, sun: pd.DataFrame
                       ) -> tuple[float | pd.Series, float | pd.Series]:
    """(surface_tilt, surface_azimuth) of the POA sensor [deg], moving when it is on a tracker."""
    if site.model.poa_sensor_on_tracker:
        return orientation(sensor_array(site), sun)
    return sensor_plane(site)


# --------------------------------------------------------------------------------------------
# the chain (pure)


def site_sun(times: pd.DatetimeIndex, site: Site, step_s: float,
             positions: ph.SunPositions | None = None) -> pd.DataFrame:
    """Sun position, air mass, extraterrestrial and clear-sky irradiance for interval starts.

    Computed at the interval mid-points, indexed by the interval starts ``times``; the sun's
    position is taken from ``positions`` (those the quality stage of the command kept), else
    computed.
    """
    pressure = float(pvlib.atmosphere.alt2pres(site.altitude_m))
    mid = ph.interval_midpoints(times, step_s)
    sun = (positions or quality.sun_positions(site)).at(mid)
    sun = sun.join(ph.atmosphere(sun, pressure))
    clear = ph.clearsky(sun, site.latitude_deg, site.longitude_deg, site.altitude_m,
                        sun["airmass_absolute"], sun["dni_extra"])
    sun["clearsky_ghi"], sun["clearsky_dni"] = clear["ghi"], clear["dni"]
    sun.index = times
    return sun


def irradiance_source(site: Site, weather: pd.DataFrame) -> str:
    """``sensor`` or ``ghi``: where plane-of-array irradiance comes from for this data.

    Raises DataError when the configured source has no readings.
    """
    has = {c: c in weather and weather[c].notna().any() for c in ("poa_sensor", "ghi")}
    choice = site.model.irradiance_source
    if choice == "poa_sensor" and not has["poa_sensor"]:
        raise DataError(f"{site.path}: model.irradiance_source is 'poa_sensor' but no poa_wm2 "
                        "readings are stored (map a 'poa' column in [[loggers]])")
    if choice == "ghi" and not has["ghi"]:
        raise DataError(f"{site.path}: model.irradiance_source is 'ghi' but no ghi_wm2 readings "
                        "are stored (map a 'ghi' column in [[loggers]])")
    if not has["poa_sensor"] and not has["ghi"]:
        raise DataError(f"{site.path}: no irradiance readings (poa_wm2 or ghi_wm2) in the "
                        "database: the expected series needs one")
    if choice == "auto":
        return "sensor" if has["poa_sensor"] else "ghi"
    return "sensor" if choice == "poa_sensor" else "ghi"


def horizontal_components(weather: pd.DataFrame, sun: pd.DataFrame, site: Site
                          ) -> pd.DataFrame:
    """GHI, DNI, DHI for transposition: measured (completed by decomposition), else GTI-DIRINT."""
    pressure = float(pvlib.atmosphere.alt2pres(site.altitude_m))
    if "ghi" in weather and weather["ghi"].notna().any():
        return ph.complete_components(weather["ghi"], sun["zenith"], weather.get("dhi"),
                                      weather.get("dni"), site.model.decomposition, pressure)
    tilt, az = sensor_orientation(site, sun)
    return ph.components_from_poa(weather["poa_sensor"], tilt, az, sun, pressure,
                                  sensor_array(site).albedo)


def sensor_plane_model(sun: pd.DataFrame, comps: pd.DataFrame, weather: pd.DataFrame,
                       site: Site) -> pd.DataFrame:
    """The sensor's plane as modelled from the horizontal components: ``poa_global``,
    ``reading`` (what the sensor reads: ``poa_global`` for a pyranometer, ``poa_effective``
    for a reference cell), and ``dni_sensitivity`` and ``beam_range`` of ``poa_global``
    (:func:`perfcheck.physics.poa_decomposition_terms`) [W/m^2]."""
    m = site.model
    tilt, azimuth = sensor_orientation(site, sun)
    twin = sensor_array(site)
    mod = ph.poa_components(tilt, azimuth, sun, comps["ghi"], comps["dni"], comps["dhi"],
                            sun["dni_extra"], sun["airmass_relative"], twin.albedo, twin.horizon,
                            m.transposition, m.iam)
    nan = pd.Series(np.nan, index=sun.index)
    split = weather.get("dni", nan).notna() | weather.get("dhi", nan).notna()
    terms = ph.poa_decomposition_terms(tilt, azimuth, sun, comps["ghi"], comps["dni"],
                                       comps["dhi"], sun["clearsky_dni"], sun["dni_extra"],
                                       sun["airmass_relative"], twin.albedo, twin.horizon,
                                       m.transposition, rows=~split)
    reading = "poa_effective" if m.poa_sensor_kind == "reference_cell" else "poa_global"
    return pd.DataFrame({"poa_global": mod["poa_global"], "reading": mod[reading],
                         "dni_sensitivity": terms["dni_sensitivity"],
                         "beam_range": terms["beam_range"]})


def decomposition_error(terms: pd.DataFrame) -> pd.Series:
    """How far a plane irradiance may move with the decomposition's split of GHI [W/m^2]:
    its sensitivity to the DNI's relative error plus its range over the beam the
    decomposition cannot see at low sun, in absolute value (both from
    :func:`perfcheck.physics.poa_decomposition_terms` or carried by
    :func:`perfcheck.physics.poa_translated`). Compares two estimates of one plane's
    irradiance, not an uncertainty. NaN where either term is."""
    return terms["dni_sensitivity"].abs() + terms["beam_range"].abs()


def array_irradiance(array: Array, sun: pd.DataFrame, comps: pd.DataFrame,
                     weather: pd.DataFrame, site: Site, source: str,
                     sensor_model: pd.DataFrame | None = None) -> pd.DataFrame:
    """POA (total, effective, modelled) and its source for one array.

    Returns ``poa_global``, ``poa_effective``, ``poa_modelled``, ``poa_effective_modelled``
    [W/m^2] (the last two from the GHI path, whatever the source), ``poa_dni_sensitivity``
    [W/m^2] (of ``poa_modelled``), ``poa_beam_range`` [W/m^2] (of ``poa_modelled`` over the
    beam the decomposition cannot see at low sun), ``from_sensor`` (bool: the sensor's reading)
    and ``translated`` (bool: the sensor's reading carried to this plane).
    ``sensor_model`` (:func:`sensor_plane_model`), given where the sensor's reading may be
    carried to other planes (:func:`translatable`): an array in another plane takes the
    reading carried by the modelled ratio of the planes
    (:func:`perfcheck.physics.poa_translated`) in the intervals where that depends less on
    the decomposition's split of GHI than its own transposed POA does
    (:func:`decomposition_error`), the transposed POA in the others (east and west planes in
    the morning, say, or with DNI or DHI measured).
    The plane moves with a tracker. For bifacial modules the effective irradiance adds the
    rear's at the bifaciality: a rear sensor's reading for the arrays in the POA sensor's
    plane where it reads, else the infinite-sheds model's (:func:`perfcheck.physics.poa_rear`;
    always for the modelled series). The totals are the front's.
    """
    m = site.model
    tilt, azimuth = orientation(array, sun)
    mod = ph.poa_components(tilt, azimuth, sun, comps["ghi"], comps["dni"], comps["dhi"],
                            sun["dni_extra"], sun["airmass_relative"], array.albedo,
                            array.horizon, m.transposition, m.iam)
    nan = pd.Series(np.nan, index=sun.index)
    split = weather.get("dni", nan).notna() | weather.get("dhi", nan).notna()  # measured
    terms = ph.poa_decomposition_terms(tilt, azimuth, sun, comps["ghi"], comps["dni"],
                                       comps["dhi"], sun["clearsky_dni"], sun["dni_extra"],
                                       sun["airmass_relative"], array.albedo, array.horizon,
                                       m.transposition, rows=~split)
    from_sensor = pd.Series(False, index=sun.index)
    translated = from_sensor
    glob, eff = mod["poa_global"], mod["poa_effective"]
    if source == "sensor" and in_sensor_plane(array, site):
        sensor = weather["poa_sensor"]
        from_sensor = sensor.notna()
        if m.poa_sensor_kind == "reference_cell":
            ratio = pd.Series(1.0, index=sun.index)
        else:
            ratio = (mod["poa_effective"] / mod["poa_global"]).where(mod["poa_global"] > 0, 1.0)
        sensor_eff = sensor * ratio.fillna(1.0)
        if m.irradiance_source == "auto":
            glob, eff = sensor.fillna(glob), sensor_eff.fillna(eff)
        else:
            glob, eff = sensor, sensor_eff
    elif sensor_model is not None:
        trans = ph.poa_translated(weather["poa_sensor"], sensor_model["reading"],
                                  mod["poa_global"], mod["poa_effective"],
                                  sensor_model["poa_global"], terms, sensor_model)
        # the reading carried over where that depends less on the decomposition's split
        translated = decomposition_error(trans) < decomposition_error(terms)
        glob = trans["poa_global"].where(translated, glob)
        eff = trans["poa_effective"].where(translated, eff)
    eff_modelled = mod["poa_effective"]
    if array.bifacial is not None:
        rear = ph.poa_rear(tilt, azimuth, sun, comps["ghi"], comps["dhi"], comps["dni"],
                           array.albedo, array.gcr, array.bifacial.row_height_m,
                           array.bifacial.row_pitch_m)
        phi = array.bifacial.bifaciality
        rear_used = rear
        if "poa_rear_sensor" in weather and in_sensor_plane(array, site):
            rear_used = weather["poa_rear_sensor"].fillna(rear)
        eff = ph.bifacial_effective(eff, rear_used, phi)
        eff_modelled = ph.bifacial_effective(eff_modelled, rear, phi)
    return pd.DataFrame({"poa_global": glob, "poa_effective": eff,
                         "poa_modelled": mod["poa_global"],
                         "poa_effective_modelled": eff_modelled,
                         "poa_dni_sensitivity": terms["dni_sensitivity"],
                         "poa_beam_range": terms["beam_range"],
                         "from_sensor": from_sensor, "translated": translated})


def array_temperature(array: Array, poa_global: pd.Series, weather: pd.DataFrame, site: Site
                      ) -> pd.Series:
    """Cell temperature of one array [C] at plane-of-array irradiance ``poa_global`` [W/m^2].

    A logged back-of-module temperature is used only for arrays that share the plane,
    mounting and construction of the array carrying the POA sensor, where it is taken to be
    fitted: a module in another plane or mounting runs at another temperature (an east array
    at low sun is cooler than a south one), so those arrays are modelled from the weather.
    """
    wind = weather["wind_speed"] if "wind_speed" in weather else None
    if wind is None or wind.isna().all():
        wind = pd.Series(DEFAULT_WIND_SPEED, index=weather.index)
    else:
        # A missing wind reading should not void the expected power: bridge short gaps
        # linearly, fill longer ones with the default speed.
        step_s = (weather.index[1] - weather.index[0]).total_seconds() if len(wind) > 1 else 1
        limit = max(1, int(WIND_GAP_BRIDGED_S // step_s))
        wind = wind.interpolate(limit=limit, limit_area="inside").fillna(DEFAULT_WIND_SPEED)
    temp_air = weather.get("temp_air", pd.Series(np.nan, index=weather.index))
    twin = sensor_array(site)
    measured = (weather.get("temp_module")
                if in_sensor_plane(array, site)
                and (array.mounting, array.construction) == (twin.mounting, twin.construction)
                else None)
    return ph.cell_temperature(poa_global, temp_air, wind, array.mounting,
                               array.construction, site.model.temperature_model, measured)


def spectral_factors(array: Array, sun: pd.DataFrame, irr: pd.DataFrame, site: Site
                     ) -> tuple[pd.Series | float, pd.Series | float]:
    """The array's spectral factor [-] for the irradiance used and for the modelled one
    (:func:`perfcheck.physics.spectral_factor_lee_panchula`); 1 where the site file names no
    cell technology. A reference cell's reading already holds its own cell's response to the
    spectrum: where the irradiance used is (or is carried from) such a reading, the factor is
    the module's relative to a monocrystalline silicon cell's, the usual reference cell."""
    if array.technology is None:
        return 1.0, 1.0
    am, w = sun["airmass_absolute"], site.model.precipitable_water_cm
    f = ph.spectral_factor_lee_panchula(am, array.technology, w)
    if site.model.poa_sensor_kind != "reference_cell":
        return f, f
    read = irr["from_sensor"] | irr["translated"]
    return f.where(~read, f / ph.spectral_factor_lee_panchula(am, "mono_si", w)), f


def inverter_dc(inv: Inverter, sun: pd.DataFrame, comps: pd.DataFrame, weather: pd.DataFrame,
                site: Site, source: str, loss_factor: np.ndarray,
                planes: dict[tuple, tuple[pd.DataFrame, pd.Series, pd.Series | None]],
                sensor_model: pd.DataFrame | None = None) -> pd.DataFrame:
    """DC power of an inverter (sum over its arrays) and DC-rating-weighted plane quantities.

    ``dc`` from the irradiance used, ``dc_modelled`` from the modelled POA alone (the same
    values for arrays the sensor does not feed). ``planes`` caches irradiance and cell
    temperature (from the irradiance used, and from the modelled POA) per distinct plane and
    mounting, so arrays that share them are computed once. ``poa_source``: ``sensor`` where
    every array takes the sensor's reading, ``translated`` where every array takes it or the
    reading carried to its plane (``sensor_model``, see :func:`array_irradiance`), else
    ``model``.
    """
    total = inv.dc_kwp
    out: pd.DataFrame | None = None
    sensor_all = pd.Series(True, index=sun.index)
    via_sensor = sensor_all.copy()
    for array in inv.arrays:
        key = plane_key(array)
        if key not in planes:
            irr = array_irradiance(array, sun, comps, weather, site, source, sensor_model)
            temp_cell = array_temperature(array, irr["poa_global"], weather, site)
            temp_modelled = (array_temperature(array, irr["poa_modelled"], weather, site)
                             if (irr["from_sensor"] | irr["translated"]).any() else None)
            planes[key] = irr, temp_cell, temp_modelled
        irr, temp_cell, temp_modelled = planes[key]
        pdc0, gamma = array.dc_kwp * 1000.0, array.gamma_pct_per_c / 100.0
        spectral, spectral_modelled = spectral_factors(array, sun, irr, site)
        dc = ph.dc_power(ph.stc_equivalent_irradiance(irr["poa_effective"], spectral,
                                                      array.low_light_loss_pct),
                         temp_cell, pdc0, gamma, loss_factor)
        dc_modelled = dc if temp_modelled is None else ph.dc_power(
            ph.stc_equivalent_irradiance(irr["poa_effective_modelled"], spectral_modelled,
                                         array.low_light_loss_pct),
            temp_modelled, pdc0, gamma, loss_factor)
        w = array.dc_kwp / total
        frame = pd.DataFrame({
            "poa_global": irr["poa_global"] * w,
            "poa_effective": irr["poa_effective"] * w,
            "poa_modelled": irr["poa_modelled"] * w,
            "poa_dni_sensitivity": irr["poa_dni_sensitivity"] * w,
            "poa_beam_range": irr["poa_beam_range"] * w,
            "temp_cell": temp_cell * w,
            "temp_cell_modelled": (temp_cell if temp_modelled is None else temp_modelled) * w,
            "dc": dc,
            "dc_modelled": dc_modelled,
        })
        out = frame if out is None else out + frame
        sensor_all &= irr["from_sensor"]
        via_sensor &= irr["from_sensor"] | irr["translated"]
    assert out is not None
    out["poa_source"] = np.select([sensor_all, via_sensor], ["sensor", "translated"], "model")
    return out


def plane_key(array: Array) -> tuple:
    """What an array's irradiance and cell temperature depend on: arrays with the same key
    share them (:func:`inverter_dc`)."""
    return (array.tilt_deg, array.azimuth_deg, array.albedo, array.horizon, array.mounting,
            array.construction, array.gcr, array.tracker, array.bifacial)


def expected_power(weather: pd.DataFrame, sun: pd.DataFrame, site: Site,
                   comps: pd.DataFrame | None = None,
                   planes: dict[tuple, tuple[pd.DataFrame, pd.Series, pd.Series | None]]
                   | None = None) -> pd.DataFrame:
    """The expected series of every inverter, long format.

    Parameters
    ----------
    weather : pandas.DataFrame
        Interval means on interval starts (UTC): ``ghi``, ``dhi``, ``dni``, ``poa_sensor``
        [W/m^2], ``temp_air``, ``temp_module`` [C], ``wind_speed`` [m/s]; absent columns are
        treated as not measured.
    sun : pandas.DataFrame
        From :func:`site_sun` on the same index.
    site : Site
    comps : pandas.DataFrame, optional
        :func:`horizontal_components` of ``weather`` and ``sun``, when the caller has them.
    planes : dict, optional
        Filled with each distinct plane's irradiance and cell temperature, keyed by
        :func:`plane_key` (see :func:`inverter_dc`), for a caller that needs them again.

    Returns
    -------
    pandas.DataFrame
        ``ts``, ``inverter_id``, ``poa_global_wm2``, ``poa_effective_wm2``,
        ``poa_modelled_wm2``, ``poa_source``, ``temp_cell_c``, ``dc_w``, ``ac_potential_w``,
        ``ac_w`` (AC rating and plant export limit applied), and ``temp_cell_modelled_c``,
        ``ac_potential_modelled_w``, ``ac_modelled_w``: the same three from the modelled POA
        alone (cell temperature, DC and AC rerun from it for arrays in the sensor's plane;
        equal to the normal values for the others), and ``poa_dni_sensitivity_wm2``, that of
        the modelled POA to the decomposition, and ``poa_beam_range_wm2``, its range over the
        beam the decomposition cannot see at low sun
        (:func:`perfcheck.physics.poa_decomposition_terms`).
    """
    source = irradiance_source(site, weather)
    if comps is None:
        comps = horizontal_components(weather, sun, site)
    loss = site.losses.dc_factor * ph.age_factor(
        sun.index, site.commissioned, site.losses.degradation_pct_per_year)
    arrays = [a for inv in site.inverters for a in inv.arrays]
    sensor_model = (sensor_plane_model(sun, comps, weather, site)
                    if source == "sensor" and translatable(site, weather)
                    and not all(in_sensor_plane(a, site) for a in arrays) else None)
    per_inv: dict[str, pd.DataFrame] = {}
    # AC power from the modelled POA alone, where it differs (an array fed by the sensor)
    per_mod: dict[str, pd.DataFrame] = {}
    planes = {} if planes is None else planes
    for inv in site.inverters:
        d = inverter_dc(inv, sun, comps, weather, site, source, loss, planes, sensor_model)
        ac = ph.ac_power(d["dc"], inv.ac_kw * 1000.0, inv.efficiency_pct / 100.0,
                         inv.night_tare_w)
        per_inv[inv.id] = d.join(ac)
        if not d["dc_modelled"].equals(d["dc"]):
            per_mod[inv.id] = ph.ac_power(d["dc_modelled"], inv.ac_kw * 1000.0,
                                          inv.efficiency_pct / 100.0, inv.night_tare_w)
    limit = None if site.export_limit_kw is None else site.export_limit_kw * 1000.0
    limited = ph.export_limited(pd.DataFrame({k: v["ac"] for k, v in per_inv.items()}), limit)
    # the export limit is shared by the plant: applied to the all-modelled series as a whole
    modelled = {k: per_mod.get(k, v) for k, v in per_inv.items()}
    limited_mod = limited if not per_mod else ph.export_limited(
        pd.DataFrame({k: v["ac"] for k, v in modelled.items()}), limit)
    # Long format, inverter after inverter. The float columns are written straight into one
    # block (a single copy of the data: this frame is the largest thing the model makes).
    ids = list(per_inv)
    floats = {out: [per_inv[k][col] for k in ids] for out, col in (
        ("poa_global_wm2", "poa_global"), ("poa_effective_wm2", "poa_effective"),
        ("poa_modelled_wm2", "poa_modelled"), ("temp_cell_c", "temp_cell"), ("dc_w", "dc"),
        ("ac_potential_w", "ac_potential"), ("temp_cell_modelled_c", "temp_cell_modelled"),
        ("poa_dni_sensitivity_wm2", "poa_dni_sensitivity"),
        ("poa_beam_range_wm2", "poa_beam_range"))}
    floats["ac_w"] = [limited[k] for k in ids]
    floats["ac_potential_modelled_w"] = [modelled[k]["ac_potential"] for k in ids]
    floats["ac_modelled_w"] = [limited_mod[k] for k in ids]
    n = len(sun.index)
    block = np.empty((len(floats), len(ids) * n))
    for row, parts in zip(block, floats.values(), strict=True):
        np.concatenate([p.to_numpy(dtype=float) for p in parts], out=row)
    out = pd.DataFrame(block.T, columns=list(floats), copy=False)
    out.insert(0, "ts", sun.index[np.tile(np.arange(n), len(ids))])
    out.insert(1, "inverter_id", np.repeat(np.array(ids, dtype=object), n))
    out.insert(5, "poa_source", np.concatenate([per_inv[k]["poa_source"].to_numpy()
                                                for k in ids]))
    return out


CLEAR_SKY_INDEX = 0.7  # intervals this close to clear sky are compared (common practice)


def daily_irradiation(measured: pd.Series, modelled: pd.Series, solar_zenith: pd.Series,
                      clear_sky_index: pd.Series, tz: str) -> pd.DataFrame:
    """Daily sums of measured and modelled POA irradiance over near-clear daylight intervals.

    Only intervals with the sun above 20 degrees (zenith < 70), a clear-sky index (GHI over
    clear-sky GHI) of at least ``CLEAR_SKY_INDEX`` and both values present count: under cloud
    and at low sun the split of GHI into beam and diffuse (Erbs's model sees only the
    clearness index, not the air mass), and so the modelled POA, is uncertain by more than a
    sensor's calibration. Columns ``measured``, ``modelled`` (sums of interval means
    [W/m^2]), index: site-local date.
    """
    ok = (solar_zenith < 70) & (clear_sky_index >= CLEAR_SKY_INDEX) & measured.notna() \
        & modelled.notna() & (modelled > 0)
    keep = ok.to_numpy()  # the local date only of the intervals that count
    frame = pd.DataFrame({"measured": measured.to_numpy()[keep],
                          "modelled": modelled.to_numpy()[keep],
                          "day": measured.index[keep].tz_convert(tz).date})
    return frame.groupby("day").sum()


def poa_plausibility(daily: pd.DataFrame) -> dict[str, Any]:
    """The daily ratio of the sensor's POA irradiation to the modelled one, summarised.

    ``daily`` from :func:`daily_irradiation` (pieces may be concatenated). Reported: the
    ratio over all days, the median and 10/90 % quantiles of the daily ratio, and its median
    per month: the model's own error changes with the season (low sun), so a sensor that
    drifts, sticks or is shaded shows as a month that departs from its neighbours. Finding
    such faults is the sensor detector's job; this is the record of the cross-check.
    """
    daily = daily.groupby(level=0).sum()
    daily = daily[daily["modelled"] > 0]
    if daily.empty:
        return {"days": 0}
    ratio = daily["measured"] / daily["modelled"]
    month = pd.DatetimeIndex(pd.to_datetime(ratio.index)).strftime("%Y-%m")
    monthly = ratio.groupby(month).median()
    return {"days": int(len(ratio)), "median_ratio": float(ratio.median()),
            "p10": float(ratio.quantile(0.1)), "p90": float(ratio.quantile(0.9)),
            "total_ratio": float(daily["measured"].sum() / daily["modelled"].sum()),
            "monthly_median_ratio": {k: round(float(v), 4) for k, v in monthly.items()}}


# --------------------------------------------------------------------------------------------
# the stage (DuckDB)


def load_weather(con: duckdb.DuckDBPyConnection, step_s: int, start: pd.Timestamp,
                 end: pd.Timestamp) -> pd.DataFrame:
    """Site weather averaged into model intervals (rain summed), pvlib column names (all of
    :data:`WEATHER`; NaN for a quantity without a site channel)."""
    stored = {q for (q,) in con.execute(db.sql("model_site_quantities")).fetchall()}
    columns = "".join(f", {'fsum' if q == 'rain_mm' else 'favg'}(value) "
                      f"FILTER (WHERE quantity = '{q}') AS {q}" for q in WEATHER if q in stored)
    df = con.execute(db.sql("model_weather").format(columns=columns),
                     {"iv": step_s, "start": start, "end": end}).df()
    df = df.set_index(pd.DatetimeIndex(df.pop("ts")).tz_convert("UTC"))
    return df.reindex(columns=list(WEATHER)).rename(columns=WEATHER).astype(float)


def stored_weather(con: duckdb.DuckDBPyConnection, step_s: int, intervals: dict[str, int],
                   start: pd.Timestamp, end: pd.Timestamp) -> pd.DataFrame:
    """The site weather as the model takes it for interval starts in [``start``, ``end``):
    averaged into its intervals (:func:`load_weather`), coarser readings held over their own
    interval (:func:`hold_coarse_weather`; ``intervals`` from :func:`weather_intervals`)."""
    back = pd.Timedelta(seconds=max(intervals.values(), default=step_s))
    weather = hold_coarse_weather(load_weather(con, step_s, start - back, end), step_s,
                                  intervals)
    return weather[weather.index >= start]


def _run_record(con: duckdb.DuckDBPyConnection, params: dict[str, Any]) -> int:
    """The model_run_id of the run with these parameters, created if new."""
    h = parameters_hash(params)
    row = align.first_row(con, db.sql("model_run_find"), [h])
    if row:
        return int(row[0])
    run_id = align.first_row(con, db.sql("model_run_insert"), {
        "hash": h, "params": json.dumps(params, sort_keys=True),
        "versions": json.dumps({**versions(), "model": MODEL_VERSION}, sort_keys=True),
        "now": dt.datetime.now(dt.UTC)})[0]
    return int(run_id)


def run(con: duckdb.DuckDBPyConnection, site: Site,
        progress: Callable[[str], None] | None = None,
        sun: ph.SunPositions | None = None) -> dict[str, Any]:
    """Build or refresh the expected series, stored beside the measured power (the aligned
    rows, :func:`perfcheck.align.store`), for the stored readings.

    Only intervals touched by readings that arrived since the aligned rows were built are computed,
    when they hold a run of the same parameters; else everything. ``sun``: the sun's positions
    kept by the quality stage of the same command (:func:`perfcheck.quality.run`), when it ran.
    Returns a summary: ``model_run_id``, ``computed_from``, ``computed_to`` (None when nothing
    was new), ``rows``, ``checks``.

    Raises DataError when there are no readings or no irradiance readings.
    """
    say = progress or (lambda _msg: None)
    site = ingest.aged(con, site)
    latest = align.first_row(con, "SELECT max(file_id) FROM readings")[0]
    intervals = ingest.channel_intervals(con)
    if latest is None or not intervals:
        raise DataError(f"{site.path}: no readings in the database yet (run 'perfcheck ingest' "
                        "first)")
    params = parameters(site, interval_s(intervals))
    step = params["interval_s"]
    has_irradiance = align.first_row(con, db.sql("model_has_irradiance"))[0]
    if not has_irradiance:
        raise DataError(f"{site.path}: no irradiance readings (poa_wm2 or ghi_wm2) in the "
                        "database: the expected series needs one (map a 'poa' or 'ghi' column "
                        "in [[loggers]])")
    with db.transaction(con):
        run_id = _run_record(con, params)
        # the aligned rows hold one run: another run's are replaced by this one's everywhere
        state = align.first_row(con, "SELECT model_run_id, last_file_id FROM align_state")
        same = state is not None and state[0] == run_id
        if not same:
            con.execute("DELETE FROM aligned_base")
        span = align.changed_span(con, state[1] if same else 0, step)
        result: dict[str, Any] = {"model_run_id": run_id, "computed_from": None,
                                  "computed_to": None, "rows": 0, "checks": None}
        if span is not None:
            start, end = span
            say(f"model: {start:%Y-%m-%d} to {end:%Y-%m-%d}")
            held = weather_intervals(intervals)
            energy_s = {d: float(v) for (q, d), v in intervals.items()
                        if q == "energy_interval_wh"}
            # one interval more: its register step starts in the span
            spans = align.chunks(start, end + pd.Timedelta(seconds=step),
                                 align.piece_days(site, step))
            # each piece's weather and inverter readings are read while the piece before is
            # computed
            inputs = db.read_ahead(con, lambda cur, s: (
                stored_weather(cur, step, held, *s), align.inverter_readings(cur, step, *s)),
                spans)
            sun = sun or quality.sun_positions(site)
            parts = [_compute(con, site, run_id, step, weather, raw, energy_s, a, b, sun)
                     for (a, b), (weather, raw) in zip(spans, inputs, strict=True)]
            daily = [p["daily"] for p in parts if p["daily"] is not None]
            result.update(computed_from=start, computed_to=end,
                          rows=sum(p["rows"] for p in parts),
                          checks=None if not daily else
                          {"poa_sensor_vs_model": poa_plausibility(pd.concat(daily)),
                           "from": start.isoformat(), "to": end.isoformat()})
        con.execute(db.sql("model_run_update"), {"id": run_id, "file_id": int(latest),
                                                  "now": dt.datetime.now(dt.UTC),
                                                  "checks": json.dumps(result["checks"])
                                                  if result["checks"] is not None else None})
        con.execute("DELETE FROM align_state")
        con.execute("INSERT INTO align_state VALUES (?, ?)", [run_id, int(latest)])
    return result


def _compute(con: duckdb.DuckDBPyConnection, site: Site, run_id: int, step: int,
             weather: pd.DataFrame, raw: pd.DataFrame, energy_s: dict[str, float],
             start: pd.Timestamp, end: pd.Timestamp, positions: ph.SunPositions
             ) -> dict[str, Any]:
    """Expected rows and conditions of [``start``, ``end``) from ``weather``
    (:func:`stored_weather`), the sun from ``positions``, stored under run ``run_id`` beside
    the measured power from the inverter readings ``raw``
    (:func:`perfcheck.align.inverter_readings`)."""
    if weather.empty:
        align.store(con, site, run_id, step, energy_s, None, raw, start, end)
        return {"rows": 0, "daily": None}
    sun = site_sun(weather.index, site, step, positions)
    irradiance_source(site, weather)  # no irradiance in this span: its error, before any work
    comps = horizontal_components(weather, sun, site)  # decomposed once, used twice below
    planes: dict[tuple, tuple[pd.DataFrame, pd.Series, pd.Series | None]] = {}
    exp = expected_power(weather, sun, site, comps, planes)
    # the conditions of each interval beside every inverter's row (rows: inverter after
    # inverter, each over the sun's index)
    conditions = {"sun_zenith_deg": sun["apparent_zenith"], "sun_azimuth_deg": sun["azimuth"],
                  "clearsky_ghi_wm2": sun["clearsky_ghi"],
                  **{q: weather[name] for q, name in CONDITIONS.items()}}
    repeat = len(exp) // len(sun)
    for q, values in conditions.items():
        exp[q] = np.tile(values.to_numpy(), repeat)
    align.store(con, site, run_id, step, energy_s,
                exp.drop(columns="poa_effective_wm2").rename(columns=ALIGNED_NAMES),
                raw, start, end)
    daily = None
    if all(c in weather and weather[c].notna().any() for c in ("poa_sensor", "ghi")):
        ref = sensor_array(site)
        if site.model.poa_sensor_on_tracker or sensor_plane(site) == (ref.tilt_deg,
                                                                      ref.azimuth_deg):
            # the sensor's plane is its array's: transposed already (the total POA does not
            # depend on the incidence-angle model)
            modelled = planes[plane_key(ref)][0]["poa_modelled"]
        else:
            tilt, az = sensor_orientation(site, sun)
            modelled = ph.poa_components(
                tilt, az, sun, comps["ghi"], comps["dni"], comps["dhi"], sun["dni_extra"],
                sun["airmass_relative"], ref.albedo, ref.horizon, site.model.transposition,
                "none")["poa_global"]
        csi = weather["ghi"] / sun["clearsky_ghi"].where(sun["clearsky_ghi"] > 0)
        daily = daily_irradiation(weather["poa_sensor"], modelled, sun["zenith"], csi,
                                  site.timezone)
    return {"rows": len(exp), "daily": daily}
