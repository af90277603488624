"""Plant physics of the demo scenario, with the faults switched on one stage at a time.

Per array: Perez (1990) transposition with its circumsolar part treated as beam; beam and
circumsolar light blocked below the horizon profile (and dimmed by the tree's crown where the
shading fault applies); the isotropic and horizon-band parts of the sky diffuse reduced by the
share of their view factor that the horizon profile hides (:func:`sky_view_ratio`); the physical
IAM (De Soto et al. 2006) for beam and Marion's (2017) integrated IAM for the sky, horizon band
and ground diffuse; SAPM cell and back-of-module temperature (King et al. 2004); a linear
DC model with the site file's losses and the Dobos (2014) part-load inverter efficiency, the AC
rating as the clipping limit and the plant export limit shared pro rata over the inverters.
Rows on single-axis trackers turn as pvlib's tracking with backtracking turns them (Marion &
Dobos 2013; Lorenzo et al. 2011), lie in stow while the wind the weather station logs reaches
the stow limit, and see the horizon through the sky view of each plane they pass; bifacial rows
add the rear irradiance of pvlib's infinite-sheds model (Mikofski et al. 2019) at their
bifaciality, less what the structure blocks.

References
----------
R. Perez, P. Ineichen, R. Seals, J. Michalsky, R. Stewart, 1990, Solar Energy 44(5):271-289.
W. De Soto, S. Klein, W. Beckman, 2006, Solar Energy 80(1):78-88.
R. Perez, R. Seals, P. Ineichen, R. Stewart, D. Menicucci, 1987, "A new simplified version of
the Perez diffuse irradiance model for tilted surfaces", Solar Energy 39(3):221-231 (the 6.5 deg
horizon band; from memory).
J. A. Duffie, W. A. Beckman, 2013, Solar Engineering of Thermal Processes, 4th ed., Wiley,
sections 2.16 and 3.8 (isotropic view factors of a tilted plane; from memory).
B. Marion, 2017, "Numerical method for angle-of-incidence correction factors for diffuse
radiation incident photovoltaic modules", Solar Energy 147:344-348.
D. King, W. Boyson, J. Kratochvil, 2004, SAND2004-3535.
A. P. Dobos, 2014, NREL/TP-6A20-62641 (report number from memory).
W. F. Marion, A. P. Dobos, 2013, "Rotation angle for the optimum tracking of one-axis
trackers", NREL/TP-6A20-58891.
E. Lorenzo, L. Narvarte, J. Munoz, 2011, "Tracking and back-tracking", Progress in
Photovoltaics 19(6):747-753.
M. Mikofski, R. Darawali, M. Hamer, A. Neubert, J. Newmiller, 2019, "Bifacial performance
modeling in large arrays", IEEE 46th PVSC, 1282-1287.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import pvlib

from perfcheck.scenario.faults import ATTRIBUTION_ORDER, Faults, iso, local_ts, window
from perfcheck.scenario.sitefile import POA_INVERTER, weather_factor
from perfcheck.scenario.weather import Weather
from perfcheck.site import Site

_SAPM_KEYS = {
    ("open_rack", "glass_glass"): "open_rack_glass_glass",
    ("open_rack", "glass_polymer"): "open_rack_glass_polymer",
    ("close_roof", "glass_glass"): "close_mount_glass_glass",
    ("close_roof", "glass_polymer"): "close_mount_glass_glass",
    ("insulated_back", "glass_glass"): "insulated_back_glass_polymer",
    ("insulated_back", "glass_polymer"): "insulated_back_glass_polymer",
}
_YEAR_S = 365.25 * 86400
PEREZ_BAND_DEG = 6.5  # width of Perez's horizon-brightening band above the horizon [deg]
# Share of the rear irradiance that the trackers' torque tube and frames block (invented for
# the demo; a few per cent is common practice, from memory). The model assumes 2 %, so the
# tracker block's truth and model differ a little, as a real plant's do.
REAR_STRUCTURE_SHADE = 0.05


def horizon_elevation(azimuth: np.ndarray, horizon: tuple) -> np.ndarray:
    """Elevation of a horizon profile at ``azimuth`` [deg]: linear between points, periodic."""
    if not horizon:
        return np.zeros_like(azimuth, dtype=float)
    az = np.array([p[0] for p in horizon])
    el = np.array([p[1] for p in horizon])
    return np.interp(azimuth, az, el, period=360.0)


def sky_view_ratio(tilt: float, azimuth: float, horizon: tuple, band_deg: float = 90.0,
                   step_deg: float = 0.1) -> float:
    """Share of a plane's isotropic view factor of a sky band that the horizon profile leaves
    open [-] (1 for a flat horizon).

    A sky element at azimuth phi, elevation e reaches a plane of tilt b and azimuth g with
    weight cos(theta) cos(e) de dphi, cos(theta) = a cos e + c sin e, a = sin b cos(phi - g),
    c = cos b (the view-factor integral of an isotropic sky dome). Along each azimuth the
    positive part of that weight is integrated in closed form,
    F(e) = a (e/2 + sin 2e / 4) + c sin^2(e) / 2, from where the sky is in front of the plane,
    e0 = atan2(max(-a, 0), c), up to ``band_deg``; the horizon hides the part below its
    elevation h(phi). The azimuth integral is a midpoint sum on a ``step_deg`` grid. Over the
    whole dome (band 90 deg) and a flat horizon the integral is pi (1 + cos b)/2, Liu & Jordan's
    view factor times pi.

    Parameters
    ----------
    tilt, azimuth : plane [deg], azimuth clockwise from north.
    horizon : (azimuth [deg], elevation [deg]) points of the profile.
    band_deg : top of the sky band [deg]: 90 for the isotropic sky, ``PEREZ_BAND_DEG`` for
        Perez's horizon-brightening band.
    step_deg : azimuth step [deg].

    References
    ----------
    J. A. Duffie, W. A. Beckman, 2013, Solar Engineering of Thermal Processes, 4th ed., sections
    2.16 and 3.8 (view factors, isotropic sky; from memory).
    B. Y. H. Liu, R. C. Jordan, 1963, Solar Energy 7(2):53-74.
    R. Perez et al., 1987, Solar Energy 39(3):221-231 (horizon band; from memory).
    """
    if not horizon:  # a flat horizon hides nothing (and the plane may move: a tracker)
        return 1.0
    phi = np.arange(step_deg / 2, 360.0, step_deg)
    h = np.radians(np.clip(horizon_elevation(phi, horizon), 0.0, 90.0))
    a = np.sin(np.radians(tilt)) * np.cos(np.radians(phi - azimuth))
    c = np.cos(np.radians(tilt))
    top = np.radians(band_deg)

    def f(e: np.ndarray | float) -> np.ndarray:
        return a * (e / 2 + np.sin(2 * e) / 4) + c * np.sin(e) ** 2 / 2

    lo = np.minimum(np.arctan2(np.maximum(-a, 0.0), c), top)
    seen = (f(top) - f(lo)).sum()
    if seen <= 0:
        return 1.0
    hidden = (f(np.minimum(np.maximum(h, lo), top)) - f(lo)).sum()
    return float(1.0 - hidden / seen)


def sky_view(tilt: float | np.ndarray, azimuth: float | np.ndarray, horizon: tuple,
             band_deg: float = 90.0) -> float | np.ndarray:
    """:func:`sky_view_ratio` of a plane, or of a moving plane (a tracker): each of its
    orientations, rounded to 0.5 deg, integrated once (the ratio changes smoothly with them)."""
    if np.ndim(tilt) == 0:
        return sky_view_ratio(float(tilt), float(azimuth), horizon, band_deg)
    if not horizon:
        return 1.0
    keys = np.stack([np.round(np.asarray(tilt) * 2) / 2,
                     np.round(np.asarray(azimuth) * 2) / 2 % 360.0], axis=1)
    planes, which = np.unique(keys, axis=0, return_inverse=True)
    table = np.array([sky_view_ratio(t, a, horizon, band_deg) for t, a in planes])
    return table[which.ravel()]


def array_irradiance(
    w: Weather, tilt: float | np.ndarray, azimuth: float | np.ndarray, albedo: float,
    beam_factor: np.ndarray,
    horizon: tuple = (), iam: tuple[Callable, str, dict] = (pvlib.iam.physical, "physical", {}),
) -> tuple[np.ndarray, np.ndarray]:
    """Plane-of-array global and IAM-effective irradiance [W/m^2].

    ``tilt`` and ``azimuth`` are arrays for a moving plane (a tracker). ``beam_factor`` (0..1)
    is the unobstructed share of the beam and circumsolar light; ``horizon`` reduces the
    isotropic sky by its sky view and the horizon band by its share of that band
    (:func:`sky_view`). Light reflected by the obstructions is neglected.
    ``iam``: the beam IAM function of the angle of incidence [deg], and the name and
    parameters of the same model for Marion's diffuse integration (the physical IAM of De
    Soto et al. by default).
    """
    zen = w.solpos["apparent_zenith"].to_numpy()
    saz = w.solpos["azimuth"].to_numpy()
    aoi = pvlib.irradiance.aoi(tilt, azimuth, zen, saz)
    comp = pvlib.irradiance.perez(
        tilt, azimuth, w.dhi, w.dni, w.dni_extra, zen, saz, w.airmass, return_components=True
    )
    circ = np.nan_to_num(np.asarray(comp["poa_circumsolar"], dtype=float)) * beam_factor
    iso = np.nan_to_num(np.asarray(comp["poa_isotropic"], dtype=float)) \
        * sky_view(tilt, azimuth, horizon)
    band = np.nan_to_num(np.asarray(comp["poa_horizon"], dtype=float)) \
        * sky_view(tilt, azimuth, horizon, PEREZ_BAND_DEG)
    beam = w.dni * np.clip(np.cos(np.radians(aoi)), 0, None) * beam_factor
    ground = np.asarray(pvlib.irradiance.get_ground_diffuse(tilt, w.ghi, albedo), dtype=float)
    beam_iam, name, params = iam
    iam_beam = np.nan_to_num(beam_iam(aoi))
    iam_d = marion_diffuse(name, tilt, params)
    poa_global = beam + circ + iso + band + ground
    poa_eff = ((beam + circ) * iam_beam + iso * iam_d["sky"] + band * iam_d["horizon"]
               + ground * iam_d["ground"])
    return poa_global, np.maximum(poa_eff, 0.0)


def marion_diffuse(name: str, tilt: float | np.ndarray, params: dict) -> dict:
    """pvlib's Marion diffuse IAMs (sky, horizon, ground) for a plane, or for a moving plane (a
    tracker) interpolated in a table over 0-90 deg every 0.5 deg, integrated once per model
    (the integral of every tilt of a year at once would take gigabytes)."""
    if np.ndim(tilt) == 0:
        return pvlib.iam.marion_diffuse(name, tilt, **params)
    grid, table = _marion_table(name, tuple(sorted(params.items())))
    t = np.asarray(tilt, dtype=float)
    return {k: np.interp(t, grid, v) for k, v in table.items()}


@functools.lru_cache(maxsize=8)
def _marion_table(name: str, params: tuple) -> tuple[np.ndarray, dict]:
    grid = np.arange(0.0, 90.25, 0.5)
    d = pvlib.iam.marion_diffuse(name, grid, **dict(params))
    return grid, {k: np.asarray(v, dtype=float) for k, v in d.items()}


def designed_rotation(w: Weather, max_angle: float, backtrack: bool, gcr: float,
                      axis_tilt: float = 0.0, axis_azimuth: float = 180.0) -> np.ndarray:
    """Rotation of single-axis tracker rows as designed [deg], positive toward the west of a
    north-south axis: pvlib's tracking (Marion & Dobos 2013), backtracking (Lorenzo et al.
    2011) where ``backtrack``; flat at night."""
    theta = pvlib.tracking.singleaxis(w.solpos["apparent_zenith"], w.solpos["azimuth"],
                                      axis_tilt, axis_azimuth, max_angle, backtrack, gcr)
    return theta["tracker_theta"].fillna(0.0).to_numpy()


def stow_mask(wind_speed: np.ndarray, limit: float, block: int = 1) -> np.ndarray:
    """Intervals in which the rows lie in stow: the mean wind speed of each block of ``block``
    intervals (the weather station's averaging), to 0.1 m/s as it is logged, at or above
    ``limit`` [m/s]."""
    mean = np.repeat(wind_speed.reshape(-1, block).mean(axis=1), block)
    return np.round(mean, 1) >= limit


def rear_irradiance(w: Weather, tilt: np.ndarray, azimuth: np.ndarray, albedo: float,
                    gcr: float, height: float, pitch: float) -> np.ndarray:
    """Irradiance on the rear of a row [W/m^2]: pvlib's infinite-sheds model (Mikofski et al.
    2019) for the front plane turned over (tilt 180 - tilt, azimuth + 180); isotropic sky."""
    back = pvlib.bifacial.infinite_sheds.get_irradiance_poa(
        180.0 - tilt, (azimuth + 180.0) % 360.0, w.solpos["apparent_zenith"].to_numpy(),
        w.solpos["azimuth"].to_numpy(), gcr, height, pitch, w.ghi, w.dhi, w.dni, albedo,
        model="isotropic")
    return np.nan_to_num(np.asarray(back["poa_global"], dtype=float))


def dobos_ac(pdc: np.ndarray, pdc0: float, eta_nom: float) -> np.ndarray:
    """Inverter AC output before the AC limit [W], part-load efficiency of Dobos (2014).

    Parameters
    ----------
    pdc : DC input [W].
    pdc0 : DC input at the AC rating, AC rating / eta_nom [W].
    eta_nom : nominal efficiency [-].

    Notes
    -----
    eta = eta_nom / 0.9637 * (-0.0162 zeta - 0.0059 / zeta + 0.9858), zeta = pdc / pdc0;
    AC = max(eta * pdc, 0). The AC limit is applied by the caller, so the unlimited potential
    (for the clipping energy) comes from the same curve.

    References
    ----------
    A. P. Dobos, 2014, NREL/TP-6A20-62641 (report number from memory), inverter section.
    """
    live = pdc > 0
    zeta = np.where(live, pdc, 1.0) / pdc0
    eta = eta_nom / 0.9637 * (-0.0162 * zeta - 0.0059 / zeta + 0.9858)
    return np.where(live, np.maximum(eta * pdc, 0.0), 0.0)


@dataclass
class Plant:
    """Per-inverter series of one run of the plant [W]; arrays of shape (n_inverters, n)."""

    ac: np.ndarray
    ac_unlimited: np.ndarray  # no AC limit, no export limit


@dataclass
class Physics:
    """What the plant sees, computed once; the faults are switched on by :func:`run_plant`."""

    site: Site
    times: pd.DatetimeIndex
    weather: Weather
    poa: dict = field(default_factory=dict)  # inverter id -> [(global, effective)] per array
    poa_tree: dict = field(default_factory=dict)  # the same behind the growing tree
    poa_stall: dict = field(default_factory=dict)  # the same with a tracker's rows stalled
    poa_unstowed: dict = field(default_factory=dict)  # trackers that keep tracking in wind
    rotation: dict = field(default_factory=dict)  # inverter id -> its trackers' rotation [deg]
    stowed: np.ndarray | None = None  # intervals in which the trackers lie in stow
    stall_angle_deg: float | None = None  # the rotation a stalled tracker is held at
    temp_cell: dict = field(default_factory=dict)  # inverter id -> [temp_cell] per array
    poa_sensor: np.ndarray | None = None  # pyranometer in the first array of POA_INVERTER
    temp_module: np.ndarray | None = None  # back-of-module sensor on that array


def tree_factor(times: pd.DatetimeIndex, w: Weather, tree: Any, tz: Any) -> np.ndarray:
    """Share of the beam that passes the tree (1 outside its crown)."""
    app_el = 90.0 - w.solpos["apparent_zenith"].to_numpy()
    saz = w.solpos["azimuth"].to_numpy()
    years = (times - local_ts(tree.reference, tz)).total_seconds().to_numpy() / _YEAR_S
    top = tree.top_deg + tree.growth_deg_per_year * years
    crown = (saz >= tree.azimuth_from_deg) & (saz <= tree.azimuth_to_deg) & (app_el < top)
    return np.where(crown, tree.transmittance, 1.0)


def tracker_irradiance(w: Weather, arr: Any, rotation: np.ndarray, visible: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray]:
    """Front global and effective irradiance [W/m^2] of tracker rows at ``rotation`` [deg];
    bifacial rows add their rear irradiance at the bifaciality, less what the structure
    blocks (``REAR_STRUCTURE_SHADE``)."""
    t = arr.tracker
    plane = pvlib.tracking.calc_surface_orientation(rotation, t.axis_tilt_deg,
                                                    t.axis_azimuth_deg)
    tilt, azimuth = (np.asarray(plane[k], dtype=float)
                     for k in ("surface_tilt", "surface_azimuth"))
    g, e = array_irradiance(w, tilt, azimuth, arr.albedo, visible, arr.horizon)
    b = arr.bifacial
    if b is not None:
        e = e + b.bifaciality * (1 - REAR_STRUCTURE_SHADE) * rear_irradiance(
            w, tilt, azimuth, arr.albedo, arr.gcr, b.row_height_m, b.row_pitch_m)
    return g, e


def _tracker(ph: Physics, inv_id: str, arr: Any, visible: np.ndarray, faults: Faults
             ) -> tuple[np.ndarray, np.ndarray]:
    """The tracker rows of one array: as designed, in stow while the logged wind reaches the
    stow limit, and held where a stall of ``faults`` holds them (a stalled drive cannot stow).
    Records the variants of :class:`Physics`; returns the fault-free rows' irradiance."""
    w, t = ph.weather, arr.tracker
    tracked = designed_rotation(w, t.max_angle_deg, t.backtrack, arr.gcr, t.axis_tilt_deg,
                                t.axis_azimuth_deg)
    interval_min = int((ph.times[1] - ph.times[0]) / pd.Timedelta(minutes=1))
    stowed = np.zeros(len(ph.times), dtype=bool) if t.stow_wind_speed_ms is None else \
        stow_mask(w.wind_speed, t.stow_wind_speed_ms, weather_factor(interval_min))
    ph.stowed = stowed if ph.stowed is None else ph.stowed | stowed
    clean = np.where(stowed, t.stow_angle_deg, tracked)
    ph.poa_unstowed.setdefault(inv_id, []).append(tracker_irradiance(w, arr, tracked, visible))
    rotation = clean
    stall = faults.tracker_stall
    if stall is not None and stall.inverter == inv_id:
        held = window(ph.times, stall.start, stall.end, ph.site.tz)
        if held.any():  # the rows stay where they were when the drive stopped
            ph.stall_angle_deg = round(float(clean[np.flatnonzero(held)[0]]), 1)
            rotation = np.where(held, ph.stall_angle_deg, clean)
            ph.poa_stall.setdefault(inv_id, []).append(
                tracker_irradiance(w, arr, rotation, visible))
    ph.rotation[inv_id] = rotation
    return tracker_irradiance(w, arr, clean, visible)


def make_physics(site: Site, times: pd.DatetimeIndex, w: Weather, faults: Faults) -> Physics:
    """Irradiance and temperatures of every array, with and without the tree, and tracker rows
    with and without their stall and their stow. A variant keeps the cell temperature of the
    fault-free rows."""
    ph = Physics(site, times, w)
    app_el = 90.0 - w.solpos["apparent_zenith"].to_numpy()
    saz = w.solpos["azimuth"].to_numpy()
    tree = faults.tree
    for inv in site.inverters:
        ph.poa[inv.id], ph.temp_cell[inv.id] = [], []
        for arr in inv.arrays:
            visible = (app_el > horizon_elevation(saz, arr.horizon)).astype(float)
            if arr.tracker is not None:
                g, e = _tracker(ph, inv.id, arr, visible, faults)
            else:
                g, e = array_irradiance(w, arr.tilt_deg, arr.azimuth_deg, arr.albedo, visible,
                                        arr.horizon)
            ph.poa[inv.id].append((g, e))
            if tree is not None and inv.id == tree.inverter:
                behind = visible * tree_factor(times, w, tree, site.tz)
                ph.poa_tree.setdefault(inv.id, []).append(
                    array_irradiance(w, arr.tilt_deg, arr.azimuth_deg, arr.albedo, behind,
                                     arr.horizon)
                )
            p = pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"][
                _SAPM_KEYS[(arr.mounting, arr.construction)]
            ]
            ph.temp_cell[inv.id].append(
                pvlib.temperature.sapm_cell(g, w.temp_air, w.wind_speed, **p)
            )
            if inv.id == POA_INVERTER and ph.poa_sensor is None:
                ph.poa_sensor = g
                ph.temp_module = pvlib.temperature.sapm_module(
                    g, w.temp_air, w.wind_speed, p["a"], p["b"]
                )
    return ph


def _dc(ph: Physics, inv: Any, poa: list) -> np.ndarray:
    """Linear DC model: P = P_stc G_eff/1000 (1 + gamma (T_cell - 25)) x design losses [W]."""
    pdc = np.zeros(len(ph.times))
    for k, arr in enumerate(inv.arrays):
        eff = poa[k][1]
        gamma = arr.gamma_pct_per_c / 100
        pdc += arr.dc_kwp * eff * (1 + gamma * (ph.temp_cell[inv.id][k] - 25))
    return pdc * ph.site.losses.dc_factor


def run_plant(ph: Physics, faults: Faults, stage: int) -> Plant:
    """The plant with the first ``stage`` faults of ATTRIBUTION_ORDER switched on."""
    site, times, tz = ph.site, ph.times, ph.site.tz
    on = set(ATTRIBUTION_ORDER[:stage])
    age_s = (times - local_ts(str(site.commissioned), tz)).total_seconds().to_numpy()
    common = np.ones(len(times))
    if "degradation" in on:
        common *= 1 - faults.degradation_pct_per_year / 100 * np.maximum(age_s, 0) / _YEAR_S
    if "soiling" in on:
        common *= soiling_ratio(times, ph.weather.rain, faults, tz)
    acs, unlimited = [], []
    for inv in site.inverters:
        poa = ph.poa[inv.id]
        if "shading" in on and inv.id in ph.poa_tree:
            poa = ph.poa_tree[inv.id]
        if "tracker_stall" in on and inv.id in ph.poa_stall:
            poa = ph.poa_stall[inv.id]
        pdc = _dc(ph, inv, poa) * common
        cut = faults.string_loss
        if "partial_outage" in on and cut is not None and cut.inverter == inv.id:
            strings = sum(a.strings for a in inv.arrays)
            lost = window(times, cut.start, cut.end, tz)
            pdc = np.where(lost, pdc * (strings - cut.strings_lost) / strings, pdc)
        eta = inv.efficiency_pct / 100
        ac_u = dobos_ac(pdc, inv.ac_kw * 1000 / eta, eta)
        ac = np.minimum(ac_u, inv.ac_kw * 1000)
        off = faults.outage
        if "outage" in on and off is not None and off.inverter == inv.id:
            down = window(times, off.start, off.end, tz)
            ac, ac_u = np.where(down, 0.0, ac), np.where(down, 0.0, ac_u)
        acs.append(ac)
        unlimited.append(ac_u)
    ac = np.array(acs)
    limit = np.full(len(times), np.inf if site.export_limit_kw is None
                    else site.export_limit_kw * 1000)
    if "curtailment" in on:
        for c in faults.curtailment:
            limit = np.where(window(times, c.start, c.end, tz),
                             np.minimum(limit, c.setpoint_kw * 1000), limit)
    total = ac.sum(axis=0)
    scale = np.where(total > limit, limit / np.where(total > 0, total, 1.0), 1.0)
    return Plant(ac=ac * scale, ac_unlimited=np.array(unlimited))


def soiling_ratio(times: pd.DatetimeIndex, rain: np.ndarray, faults: Faults, tz: Any
                  ) -> np.ndarray:
    """Soiling ratio (clean = 1): linear loss between washes, in the manner of Kimber et al.

    Within each dusty episode the loss grows at the episode's rate [%/day]; rain of at least
    ``faults.soiling_rain_mm`` within 24 h washes the modules; the episode ends with a cleaning.

    References
    ----------
    A. Kimber, L. Mitchell, S. Nogradi, H. Wenger, 2006, "The effect of soiling on large
    grid-connected photovoltaic systems in California and the Southwest region of the United
    States", IEEE 4th World Conference on Photovoltaic Energy Conversion.
    """
    ratio = np.ones(len(times))
    step = (times[1] - times[0]) if len(times) > 1 else pd.Timedelta(minutes=5)
    per_day = int(pd.Timedelta(days=1) / step)
    total = np.cumsum(rain)
    rain24 = total - np.concatenate([np.zeros(per_day), total[:-per_day]])[: len(rain)]
    washed = rain24 >= faults.soiling_rain_mm
    t_days = (times - times[0]).total_seconds().to_numpy() / 86400
    for ep in faults.soiling:
        inside = np.flatnonzero(window(times, ep.start, ep.cleaning, tz))
        if not len(inside):
            continue
        # days since the last wash: the episode start, or the latest washed interval
        wash_at = np.where(washed[inside], t_days[inside], -np.inf)
        wash_at[0] = max(wash_at[0], t_days[inside[0]])
        last = np.maximum.accumulate(wash_at)
        ratio[inside] = 1 - ep.rate_pct_per_day / 100 * (t_days[inside] - last)
    return ratio


def soiling_recoveries(times: pd.DatetimeIndex, rain: np.ndarray, faults: Faults, tz: Any
                       ) -> list[dict]:
    """Recoveries in the soiling episodes: the first interval of each rain wash, and cleanings."""
    ratio = soiling_ratio(times, rain, faults, tz)
    out = []
    for ep in faults.soiling:
        inside = np.flatnonzero(window(times, ep.start, ep.cleaning, tz))
        if not len(inside):
            continue
        jumps = inside[1:][np.diff(ratio[inside]) > 1e-9]
        out += [{"at": iso(times[i], tz), "cause": "rain",
                 "soiling_loss_pct_before": round(100 * (1 - ratio[i - 1]), 2)} for i in jumps]
        out.append({"at": iso(local_ts(ep.cleaning, tz), tz), "cause": "cleaning",
                    "soiling_loss_pct_before": round(100 * (1 - ratio[inside[-1]]), 2)})
    return out
