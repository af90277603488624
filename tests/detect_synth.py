"""A small synthetic plant in the shape of ``perfcheck.align.load_aligned``, with chosen faults.

Invented data for the detectors' synthetic-truth tests: weather from pvlib's Ineichen clear sky
times a day-type clearness index, the expected series from a linear DC model (Dobos 2014) with a
flat inverter efficiency, and the measured series from the same physics with the faults applied
and 1 % multiplicative noise. Everything seeded.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pvlib

from perfcheck.site import Site, parse_site

LAT, LON, TZ = 46.2, 7.3, "Europe/Zurich"


TRACKER = {"tracking": "single_axis", "axis_tilt_deg": 0.0, "axis_azimuth_deg": 180.0,
           "max_angle_deg": 55.0, "backtrack": True, "gcr": 0.35}


def make_site(n_inverters: int = 3, ac_kw: float = 10.0, dc_kwp: float = 12.0,
              strings: int = 4, export_limit_kw: float | None = None,
              detect: dict | None = None, tracker: dict | None = None,
              sensors: dict[str, str] | None = None) -> Site:
    """``tracker``: the keys of a single-axis tracker array (e.g. :data:`TRACKER`) for every
    array instead of the fixed 30 deg south plane; ``sensors``: the logger that records each
    irradiance sensor (``{"poa": "synthetic", "ghi": "met"}``: ``synthetic`` is the inverters'
    logger; a sensor left out is not stated in the site file)."""
    plane = tracker or {"tilt_deg": 30.0, "azimuth_deg": 180.0}
    raw = {
        "site": {"name": "Synthetic Test Field", "latitude_deg": LAT, "longitude_deg": LON,
                 "altitude_m": 500.0, "timezone": TZ, "commissioned": pd.Timestamp(
                     "2024-01-01").date()},
        "inverters": [
            {"id": f"INV{i + 1}", "ac_kw": ac_kw, "arrays": [
                {"dc_kwp": dc_kwp, **plane, "gamma_pct_per_c": -0.37, "strings": strings}]}
            for i in range(n_inverters)
        ],
        "losses": {"degradation_pct_per_year": 0.0},
        "loggers": [{"name": "synthetic", "interval_min": 15, "time": {
            "columns": ["t"], "kind": "iso"}, "columns": [
            {"name": f"p{i + 1}", "quantity": "ac_power", "unit": "W", "inverter": f"INV{i + 1}"}
            for i in range(n_inverters)]}],
    }
    for quantity, name in (sensors or {}).items():
        column = {"name": quantity, "quantity": quantity, "unit": "W/m2"}
        lg = next((x for x in raw["loggers"] if x["name"] == name), None)
        if lg is None:
            lg = {"name": name, "interval_min": 15, "time": {"columns": ["t"], "kind": "iso"},
                  "columns": []}
            raw["loggers"].append(lg)
        lg["columns"].append(column)
    if export_limit_kw is not None:
        raw["site"]["export_limit_kw"] = export_limit_kw
    if detect:
        raw["detect"] = detect
    return parse_site(raw, Path("synthetic.toml"))


def make_aligned(site: Site, start: str = "2024-03-01", days: int = 60, freq_min: int = 15,
                 seed: int = 1, faults: list[dict] | None = None, noise: float = 0.01,
                 clear_share: float = 0.5) -> pd.DataFrame:
    """Aligned rows for ``days`` days at ``freq_min``; ``faults`` is a list of dicts:

    - ``{"kind": "outage", "inverter": id, "start": ts, "end": ts}``
    - ``{"kind": "partial", "inverter": id, "start": ts, "end": ts, "share": 0.25}``
    - ``{"kind": "soiling", "rate_per_day": 0.003, "cleanings": [dates], "start": date,
      "rain_mm": 10}`` (plant; from ``start``, reset at each cleaning, rain logged there)
    - ``{"kind": "curtail", "start": ts, "end": ts, "fraction": 0.6}`` (plant, all inverters)
    - ``{"kind": "derate", "inverter": id, "start": ts, "end": ts, "fraction": 0.7}`` (one
      inverter limited to that share of its rating)
    - ``{"kind": "degradation", "rate_pct_per_year": -1.0}``
    - ``{"kind": "sensor", "start": ts, "end": ts, "scale": 0.9}`` (POA sensor reads low)
    - ``{"kind": "clock", "start": ts, "end": ts, "minutes": 40}`` (measured labelled late;
      with ``"sensor": True`` the POA sensor too, as when it sits on the inverters' logger)
    - ``{"kind": "fog", "start": ts, "end": ts, "until_hour": 11, "kt": 0.3}`` (weather, not
      a fault: every morning of the window the clearness index is ``kt`` until that local
      hour, in the irradiance and the power alike)
    - ``{"kind": "lowlight", "inverter": id, "below_wm2": 250, "share": 0.15}`` (no fault:
      the array's efficiency ``share`` lower wherever its irradiance is below ``below_wm2``,
      a low-light behaviour the model does not know)
    - ``{"kind": "shading", "inverter": id, "azimuth": (a0, a1), "elevation_start": e0,
      "elevation_end": e1}`` (an obstruction whose top grows linearly over the period)
    - tracker sites: ``{"kind": "stall", "inverter": id, "start": ts, "end": ts, "angle": a}``
      (rows held at ``a`` deg), ``{"kind": "step", ..., "offset": d}`` (rows turned ``d`` deg
      off the design), ``{"kind": "wind", "start": ts, "end": ts, "speed": v}`` (wind logged
      at ``v`` m/s; the rows stow flat where it reaches the array's ``stow_wind_speed_ms``)
    """
    rng = np.random.default_rng(seed)
    faults = faults or []
    idx = pd.date_range(pd.Timestamp(start, tz=TZ).tz_convert("UTC"), periods=days * 1440 //
                        freq_min, freq=f"{freq_min}min")
    mid = idx + pd.Timedelta(minutes=freq_min / 2)
    loc = pvlib.location.Location(LAT, LON, TZ, 500.0)
    sp = loc.get_solarposition(mid)
    cs = loc.get_clearsky(mid, model="ineichen", solar_position=sp)
    local_day = idx.tz_convert(TZ).normalize()
    day_codes, uniq = pd.factorize(local_day)
    kind = rng.choice([0, 1, 2], size=len(uniq), p=[clear_share, (1 - clear_share) / 2,
                                                     (1 - clear_share) / 2])
    base = np.array([1.0, 0.65, 0.3])[kind][day_codes]
    wiggle = np.where(kind[day_codes] == 0, 0.005, 0.12)
    kt = np.clip(base * (1 + wiggle * rng.standard_normal(len(idx))), 0.05, 1.2)
    hour = idx.tz_convert(TZ).hour.to_numpy()
    for f in faults:
        if f["kind"] == "fog":
            m = (idx >= pd.Timestamp(f["start"], tz=TZ)) & (idx < pd.Timestamp(f["end"], tz=TZ))
            kt[m & (hour < f["until_hour"])] = f["kt"]
    ghi = cs["ghi"].to_numpy() * kt
    zen = sp["apparent_zenith"].to_numpy()
    cosz = np.clip(np.cos(np.radians(zen)), 0, 1)
    dni = cs["dni"].to_numpy() * np.clip((kt - 0.3) / 0.7, 0, 1)
    erbs = {"dni": dni, "dhi": np.maximum(ghi - dni * cosz, 0)}
    arr = site.inverters[0].arrays[0]

    def poa_of(theta: np.ndarray | None) -> np.ndarray:
        if theta is None:
            tilt, az = arr.tilt_deg, arr.azimuth_deg
        else:
            plane = pvlib.tracking.calc_surface_orientation(theta, 0.0, arr.azimuth_deg)
            tilt, az = plane["surface_tilt"], plane["surface_azimuth"]
        return pvlib.irradiance.get_total_irradiance(
            tilt, az, sp["apparent_zenith"], sp["azimuth"], erbs["dni"], ghi, erbs["dhi"],
            albedo=0.2)["poa_global"].fillna(0).to_numpy()

    theta_design = None
    if arr.tracker is not None:
        t = arr.tracker
        theta_design = pvlib.tracking.singleaxis(
            sp["apparent_zenith"], sp["azimuth"], t.axis_tilt_deg, t.axis_azimuth_deg,
            t.max_angle_deg, t.backtrack, arr.gcr)["tracker_theta"].fillna(0.0).to_numpy()
    poa = poa_of(theta_design)
    doy = idx.day_of_year.to_numpy()
    temp_air = 12 + 8 * np.sin(2 * np.pi * (doy - 110) / 365) + 5 * np.sin(
        2 * np.pi * (idx.hour.to_numpy() - 9) / 24)
    wind = np.full(len(idx), 2.0)
    for f in faults:
        if f["kind"] == "wind":
            s0, e0 = (pd.Timestamp(f[k], tz=TZ) for k in ("start", "end"))
            wind[(idx >= s0) & (idx < e0)] = f["speed"]
    # back-of-module and cell temperature by SAPM (King et al. 2004, SAND2004-3535, eqs. 11
    # and 12; glass/polymer open rack), as a logged module temperature would read
    tmod = pvlib.temperature.sapm_module(poa, temp_air, wind, -3.56, -0.075)
    tcell = pvlib.temperature.sapm_cell_from_module(tmod, poa, 3)
    years = ((idx - pd.Timestamp(site.commissioned, tz="UTC")).total_seconds() / 3.15576e7
             ).to_numpy()
    rain = np.zeros(len(idx))

    def window(f: dict) -> np.ndarray:
        s = pd.Timestamp(f["start"], tz=TZ) if isinstance(f["start"], str) else f["start"]
        e = pd.Timestamp(f["end"], tz=TZ) if isinstance(f["end"], str) else f["end"]
        return (idx >= s) & (idx < e)

    sensor_scale = np.ones(len(idx))
    for f in faults:
        if f["kind"] == "sensor":
            sensor_scale[window(f)] = f["scale"]
    poa_sensor = poa * sensor_scale
    for f in faults:
        if f["kind"] == "clock" and f.get("sensor"):
            m = window(f)
            poa_sensor[m] = np.roll(poa_sensor, int(round(f["minutes"] / freq_min)))[m]
    rows = []
    for inv in site.inverters:
        pdc0 = inv.dc_kwp * 1000 * 0.92
        gamma = arr.gamma_pct_per_c / 100

        def ac_of(g: np.ndarray, pdc0: float = pdc0, gamma: float = gamma) -> np.ndarray:
            tc = pvlib.temperature.sapm_cell(g, temp_air, wind, -3.56, -0.075, 3)
            return np.maximum(g / 1000 * pdc0 * (1 + gamma * (tc - 25)) * 0.96, 0)

        potential = ac_of(poa_sensor)
        expected = np.minimum(potential, inv.ac_kw * 1000)
        potential_modelled = ac_of(poa)  # what the model stage computes from modelled POA
        true_factor = np.ones(len(idx))
        beam_factor = np.ones(len(idx))
        for f in faults:
            k = f["kind"]
            if k == "degradation":
                true_factor *= 1 + f["rate_pct_per_year"] / 100 * years
            elif k == "soiling":
                clean = [pd.Timestamp(c, tz=TZ) for c in f.get("cleanings", [])]
                t_ns = idx.as_unit("ns").asi8
                first = pd.Timestamp(f["start"], tz=TZ).value if "start" in f else t_ns[0]
                last = np.full(len(idx), first, dtype=np.int64)
                for c in clean:
                    last = np.where(t_ns >= c.value, np.maximum(last, c.value), last)
                dry = np.clip((t_ns - last) / 86400e9, 0, None)
                true_factor *= 1 - f["rate_per_day"] * dry
                for c in clean:
                    rain[(idx >= c) & (idx < c + pd.Timedelta(hours=2))] = f.get("rain_mm", 0)
            elif k == "partial" and f["inverter"] == inv.id:
                true_factor[window(f)] *= 1 - f["share"]
            elif k == "lowlight" and f["inverter"] == inv.id:
                true_factor[poa < f["below_wm2"]] *= 1 - f["share"]
            elif k == "shading" and f["inverter"] == inv.id:
                a0, a1 = f["azimuth"]
                top = f["elevation_start"] + (f["elevation_end"] - f["elevation_start"]) * (
                    np.arange(len(idx)) / len(idx))
                elev = 90 - sp["apparent_zenith"].to_numpy()
                az = sp["azimuth"].to_numpy()
                shaded = (az >= a0) & (az <= a1) & (elev < top)
                beam_share = np.clip(1 - erbs["dhi"] / np.maximum(ghi, 1), 0, 1)
                beam_factor[shaded] = 1 - 0.9 * beam_share[shaded]
        g_true = _tracker_poa(faults, inv.id, arr, theta_design, wind, window, poa_of, poa) \
            * true_factor * beam_factor
        measured = np.minimum(ac_of(g_true), inv.ac_kw * 1000)
        measured = measured * (1 + noise * rng.standard_normal(len(idx)))
        for f in faults:
            k = f["kind"]
            if k == "outage" and f["inverter"] == inv.id:
                measured[window(f)] = 0.0
            elif k == "curtail" or (k == "derate" and f["inverter"] == inv.id):
                m = window(f)
                measured[m] = np.minimum(measured[m], f["fraction"] * inv.ac_kw * 1000)
            elif k == "clock":
                m = window(f)
                shift = int(round(f["minutes"] / freq_min))
                measured[m] = np.roll(measured, shift)[m]
        measured = np.where(zen < 90, np.maximum(measured, 0), 0.0)
        rows.append(pd.DataFrame({
            "ts": idx, "inverter_id": inv.id, "interval_s": freq_min * 60.0,
            "measured_ac_w": measured, "expected_ac_w": expected, "potential_ac_w": potential,
            "expected_ac_modelled_w": np.minimum(potential_modelled, inv.ac_kw * 1000),
            "potential_ac_modelled_w": potential_modelled,
            "expected_dc_w": potential / 0.96, "poa_wm2": poa_sensor,
            "poa_modelled_wm2": poa, "ghi_wm2": ghi,
            # a tracker plant's expected power comes from its GHI (no sensor on a tracker)
            "poa_source": "sensor" if theta_design is None else "model",
            "clearsky_ghi_wm2": cs["ghi"].to_numpy(), "temp_air_c": temp_air,
            "wind_speed_ms": wind, "temp_module_c": tmod, "temp_cell_c": tcell,
            "rain_mm": rain, "sun_zenith_deg": sp["apparent_zenith"].to_numpy(),
            "sun_azimuth_deg": sp["azimuth"].to_numpy(), "flags": "",
        }))
    return pd.concat(rows, ignore_index=True)


def _tracker_poa(faults: list[dict], inv_id: str, arr, theta: np.ndarray | None,
                 wind: np.ndarray, window, poa_of, poa: np.ndarray) -> np.ndarray:
    """The plane irradiance the rows of one inverter really got: stalled, out of step, or
    stowed flat in high wind (a fixed array: ``poa``)."""
    if theta is None:
        return poa
    true = theta.copy()
    lim = arr.tracker.max_angle_deg
    for f in faults:
        if f["kind"] == "stall" and f["inverter"] == inv_id:
            true[window(f)] = f["angle"]
        elif f["kind"] == "step" and f["inverter"] == inv_id:
            m = window(f)
            true[m] = np.clip(true[m] + f["offset"], -lim, lim)
    if arr.tracker.stow_wind_speed_ms is not None:
        true[wind >= arr.tracker.stow_wind_speed_ms] = arr.tracker.stow_angle_deg
    return poa if np.array_equal(true, theta) else poa_of(true)
