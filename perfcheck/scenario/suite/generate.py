"""Write one plant of the suite: site.toml, logger CSV files and truth.json.

The plant's physics are the demo's (:mod:`perfcheck.scenario.plant`: Perez transposition, the
linear DC model, Dobos's inverter curve, faults switched on stage by stage and their energy
attributed by :mod:`perfcheck.scenario.truth`) with the differences of
:mod:`perfcheck.scenario.suite.physics` folded into each array's effective irradiance and cell
temperature: the plant's own IAM, the SAPM spectral factor, the ADR low-light efficiency, its
true mismatch loss against the 1 % the site file states, and a thermal lag of the module.
The sensors, their faults (step bias, slow drift, stuck) and the meter are the demo's
(:func:`perfcheck.scenario.logs.sensor_readings`); the clock fault uses the demo's label rule.
On top: an inverter derated below its rating (a clipping fault), applied last.
"""

from __future__ import annotations

import json
from dataclasses import asdict, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pvlib

from perfcheck.scenario.faults import ATTRIBUTION_ORDER, NO_FAULTS, Faults, entry, iso, window
from perfcheck.scenario.logs import _main_labels, fmt, sensor_readings
from perfcheck.scenario.plant import (
    Physics,
    Plant,
    array_irradiance,
    designed_rotation,
    rear_irradiance,
    run_plant,
    stow_mask,
    tree_factor,
)
from perfcheck.scenario.sitefile import METER_AC_LOSS_PCT
from perfcheck.scenario.suite import physics as truth_physics
from perfcheck.scenario.suite.climate import climate, make_weather, read_typical_year
from perfcheck.scenario.suite.design import MODULE_TECHNOLOGY, PlantSpec, draw_plant
from perfcheck.scenario.truth import energy_truth
from perfcheck.scenario.weather import Weather
from perfcheck.site import Site, load_site

GENERATOR_VERSION = "2"
MAIN_LOGGER = "dl"
STATION = "met"
SITE_MISMATCH_PCT = 1.0  # what every suite site file states
SAPM_OPEN_RACK = pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"]["open_rack_glass_polymer"]


def site_text(spec: PlantSpec, lat: float, lon: float, alt: float, tz: str,
              stow_ms: float | None = None) -> str:
    """The plant's site file: design, losses as stated, the two loggers; ``stow_ms``: the
    trackers' stow limit, where the site file states it."""
    semi = spec.csv_style == "semicolon"
    lines = [
        f"# Invented plant of the perfcheck scenario suite (plant {spec.index}); the weather",
        "# is a typical year that pvlib ships, the plant and its loggers do not exist.",
        "[site]", f'name = "{spec.name}"', f"latitude_deg = {lat}", f"longitude_deg = {lon}",
        f"altitude_m = {alt}", f'timezone = "{tz}"', f"commissioned = {spec.start.isoformat()}",
        "albedo = 0.2", "",
    ]
    for inv in spec.inverters:
        lines += ["[[inverters]]", f'id = "{inv.id}"', f"ac_kw = {inv.ac_kw}",
                  "efficiency_pct = 97.5", ""]
        for a in inv.arrays:
            lines += ["  [[inverters.arrays]]", f"  dc_kwp = {a.dc_kwp}",
                      *_plane_keys(spec, a, stow_ms),
                      f"  gamma_pct_per_c = {a.gamma_pct_per_c}", *_module_keys(spec),
                      '  mounting = "open_rack"',
                      '  construction = "glass_polymer"', f"  strings = {a.strings}", ""]
    first = spec.inverters[0].arrays[0]
    lines += ["[losses]", "wiring_pct = 1.5", f"mismatch_pct = {SITE_MISMATCH_PCT}",
              "nameplate_pct = 0.5", "lid_pct = 1.5", "other_pct = 0.5",
              "degradation_pct_per_year = 0.5", "",
              # the register comes from the demo's meter (sensor_readings): its AC loss
              "[meter]", f"ac_loss_pct = {METER_AC_LOSS_PCT}", ""]
    if spec.tracker is None:
        lines += ["[model]", f"poa_sensor_tilt_deg = {first.tilt_deg}",
                  f"poa_sensor_azimuth_deg = {first.azimuth_deg}", ""]
    lines += [
              "[[loggers]]", f'name = "{MAIN_LOGGER}"', f'match = "{MAIN_LOGGER}_*.csv"',
              f'delimiter = "{";" if semi else ","}"', f'decimal = "{"," if semi else "."}"',
              f"interval_min = {spec.interval_min}", "",
              "  [loggers.time]", '  columns = ["time"]', '  kind = "local"',
              f'  format = "{"%d.%m.%Y %H:%M" if semi else "%Y-%m-%d %H:%M"}"',
              '  label = "end"', ""]
    columns = [(f"P_{inv.id}", "ac_power", "kW", inv.id) for inv in spec.inverters]
    columns.append(("E_meter", "energy_register", "kWh", "plant"))
    if spec.has_poa:
        columns += [("G_poa", "poa", "W/m2", None), ("T_mod", "temp_module", "C", None)]
    for name, q, unit, dev in columns:
        lines += ["  [[loggers.columns]]", f'  name = "{name}"', f'  quantity = "{q}"',
                  f'  unit = "{unit}"'] + ([f'  inverter = "{dev}"'] if dev else []) + [""]
    lines += ["[[loggers]]", f'name = "{STATION}"', f'match = "{STATION}_*.csv"',
              f"interval_min = {spec.interval_min}", "", "  [loggers.time]",
              '  columns = ["time"]', '  kind = "iso"', '  label = "start"', ""]
    angle = [("angle", "tracker_angle", "deg")] if spec.tracker and spec.tracker.angle_channel \
        else []
    for name, q, unit in ([("ghi", "ghi", "W/m2")] if spec.has_ghi else []) + [
            ("tamb", "temp_air", "C"), ("wind", "wind_speed", "m/s")] + angle:
        lines += ["  [[loggers.columns]]", f'  name = "{name}"', f'  quantity = "{q}"',
                  f'  unit = "{unit}"', ""]
    return "\n".join(lines)


def _module_keys(spec: PlantSpec) -> list[str]:
    """What the module's datasheet states: its cell technology, and how far its efficiency at
    200 W/m^2 (and 25 C) falls below its STC value [%], read off the plant's true curve."""
    p = spec.physics
    eta = truth_physics.relative_efficiency_adr(200.0, p.adr_k_d, p.adr_k_rs, p.adr_k_rsh)
    return [f'  technology = "{MODULE_TECHNOLOGY[p.spectral_module]}"',
            f"  low_light_loss_pct = {round(100.0 * (1.0 - float(eta)), 1)}"]


def _plane_keys(spec: PlantSpec, a: Any, stow_ms: float | None) -> list[str]:
    """The site-file keys of an array's plane: fixed, or a horizontal single-axis tracker
    (north-south axis), bifacial or not, with its stow limit when the site file states it."""
    t = spec.tracker
    if t is None:
        return [f"  tilt_deg = {a.tilt_deg}", f"  azimuth_deg = {a.azimuth_deg}"]
    keys = ['  tracking = "single_axis"', "  axis_tilt_deg = 0.0", "  axis_azimuth_deg = 180.0",
            f"  max_angle_deg = {t.max_angle_deg}", f"  backtrack = {str(t.backtrack).lower()}",
            f"  gcr = {t.gcr}"]
    if stow_ms is not None:
        keys.append(f"  stow_wind_speed_ms = {stow_ms}")
    if t.bifaciality is not None:
        keys += [f"  bifaciality = {t.bifaciality}", f"  row_height_m = {t.row_height_m}",
                 f"  row_pitch_m = {t.row_pitch_m}"]
    return keys


def _iam(spec: PlantSpec) -> tuple:
    p = spec.physics
    if p.iam == "ashrae":
        return (lambda aoi: truth_physics.iam_ashrae(aoi, p.iam_parameter), "ashrae",
                {"b": p.iam_parameter})
    return (lambda aoi: truth_physics.iam_martin_ruiz(aoi, p.iam_parameter), "martin_ruiz",
            {"a_r": p.iam_parameter})


def spectral_coefficients(module: str) -> tuple:
    """(A0..A4) of a module of the Sandia database that pvlib ships."""
    mod = pvlib.pvsystem.retrieve_sam("SandiaMod")[module]
    return tuple(float(mod[f"A{k}"]) for k in range(5))


def make_physics(spec: PlantSpec, site: Site, times: pd.DatetimeIndex, w: Weather,
                 rotation: dict[str, np.ndarray] | None = None) -> Physics:
    """Irradiance reaching the cells and cell temperature of every array, by the truth physics.

    ``rotation``: per inverter, the rotation its tracker rows really had [deg] (a tracker
    plant); bifacial rows add their rear irradiance (infinite sheds, pvlib) at the
    bifaciality, less the plant's true share blocked by the structure."""
    p = spec.physics
    ph = Physics(site, times, w)
    am_abs = pvlib.atmosphere.get_absolute_airmass(w.airmass,
                                                   pvlib.atmosphere.alt2pres(site.altitude_m))
    f1 = truth_physics.spectral_factor_sapm(np.asarray(am_abs), spectral_coefficients(
        p.spectral_module))
    step_s = (times[1] - times[0]).total_seconds()
    iam = _iam(spec)

    def effective(eff: np.ndarray, inv_id: str) -> np.ndarray:
        e = eff * f1
        mismatch = (1 - p.mismatch_pct[inv_id] / 100) / (1 - SITE_MISMATCH_PCT / 100)
        return np.maximum(e * truth_physics.relative_efficiency_adr(
            e, p.adr_k_d, p.adr_k_rs, p.adr_k_rsh), 0.0) * mismatch

    ones = np.ones(len(times))
    for inv in site.inverters:
        ph.poa[inv.id], ph.temp_cell[inv.id] = [], []
        for arr in inv.arrays:
            tilt, azimuth = arr.tilt_deg, arr.azimuth_deg
            if rotation is not None:
                plane = pvlib.tracking.calc_surface_orientation(rotation[inv.id], 0.0, 180.0)
                tilt, azimuth = (np.asarray(plane[k], dtype=float)
                                 for k in ("surface_tilt", "surface_azimuth"))
            g, e = array_irradiance(w, tilt, azimuth, arr.albedo, ones, (), iam)
            if spec.tracker is not None and spec.tracker.bifaciality is not None:
                e = e + _rear(spec, w, tilt, azimuth, arr.albedo)
            ph.poa[inv.id].append((g, effective(e, inv.id)))
            if spec.tree is not None and inv.id == spec.tree.inverter:
                gt, et = array_irradiance(w, arr.tilt_deg, arr.azimuth_deg, arr.albedo,
                                          tree_factor(times, w, spec.tree, site.tz), (), iam)
                ph.poa_tree.setdefault(inv.id, []).append((gt, effective(et, inv.id)))
            steady = pvlib.temperature.sapm_module(g, w.temp_air, w.wind_speed,
                                                   SAPM_OPEN_RACK["a"], SAPM_OPEN_RACK["b"])
            module = truth_physics.thermal_lag(np.asarray(steady), step_s, p.thermal_tau_s)
            ph.temp_cell[inv.id].append(np.asarray(pvlib.temperature.sapm_cell_from_module(
                module, g, SAPM_OPEN_RACK["deltaT"])))
            if ph.poa_sensor is None:
                ph.poa_sensor, ph.temp_module = g, module
    return ph


def _rear(spec: PlantSpec, w: Weather, tilt: np.ndarray, azimuth: np.ndarray, albedo: float
          ) -> np.ndarray:
    """Rear irradiance that reaches the cells of bifacial rows [W/m^2]: pvlib's infinite-sheds
    model (Mikofski et al. 2019) times the bifaciality, less the true structure shading."""
    t = spec.tracker
    return rear_irradiance(w, tilt, azimuth, albedo, t.gcr, t.row_height_m,
                           t.row_pitch_m) * t.bifaciality * (1.0 - t.rear_shade)


def stow_limit(spec: PlantSpec, w: Weather) -> float:
    """The plant's stow wind speed [m/s]: its drawn quantile of the daylight wind speed, to
    0.1 m/s (the logger's resolution)."""
    day = w.solpos["apparent_zenith"].to_numpy() < 90
    return round(float(np.quantile(w.wind_speed[day], spec.tracker.stow_quantile)), 1)


def rotations(spec: PlantSpec, site: Site, times: pd.DatetimeIndex, w: Weather, limit: float,
              faults: tuple = (), stow: bool = True) -> dict[str, np.ndarray]:
    """Per inverter, the rotation of its rows [deg]: the design (pvlib's single-axis tracking,
    Marion & Dobos 2013; backtracking Lorenzo et al. 2011; flat at night), turned by an offset
    where ``faults`` put one, flat (stow) where the logged wind reaches ``limit`` and held at
    a stalled angle (a stalled drive cannot stow)."""
    t = spec.tracker
    theta = designed_rotation(w, t.max_angle_deg, t.backtrack, t.gcr)
    windy = stow_mask(w.wind_speed, limit)
    out = {}
    for inv in spec.inverters:
        th = theta.copy()
        mine = [f for f in faults if f.inverter == inv.id]
        for f in (f for f in mine if f.mode == "step"):
            m = window(times, f.start, f.end, site.tz)
            th[m] = np.clip(th[m] + f.angle_deg, -t.max_angle_deg, t.max_angle_deg)
        if stow:
            th[windy] = 0.0
        for f in (f for f in mine if f.mode == "stall"):
            th[window(times, f.start, f.end, site.tz)] = f.angle_deg
        out[inv.id] = th
    return out


def tracker_truth(spec: PlantSpec, site: Site, times: pd.DatetimeIndex, w: Weather,
                  limit: float, ph: Physics, faults: Faults, interval_min: int) -> list[dict]:
    """Truth entries of the tracker faults (each: the plant with all faults against the plant
    without that one) and of the wind stow (design, per run of stow days)."""
    full = len(ATTRIBUTION_ORDER)
    ac = run_plant(ph, faults, full).ac
    h = interval_min / 60 / 1000
    out = []
    for f in spec.tracker_faults:
        rest = tuple(x for x in spec.tracker_faults if x is not f)
        ref = run_plant(make_physics(spec, site, times, w, rotations(
            spec, site, times, w, limit, rest)), faults, full).ac
        i = [inv.id for inv in site.inverters].index(f.inverter)
        kind = "tracker_stall" if f.mode == "stall" else "tracker_out_of_step"
        out.append(entry(kind, f"inverter:{f.inverter}", f.start, f.end, site.tz, {
            "mode": f.mode, "angle_deg" if f.mode == "stall" else "offset_deg": f.angle_deg},
            float((ref[i] - ac[i]).sum() * h)))
    still = run_plant(make_physics(spec, site, times, w, rotations(
        spec, site, times, w, limit, spec.tracker_faults, stow=False)), faults, full).ac
    kept = (still - ac).sum(axis=0)
    windy = stow_mask(w.wind_speed, limit) & (w.solpos["apparent_zenith"].to_numpy() < 90)
    local = times.tz_convert(site.tz)
    days = np.asarray(local.normalize().tz_localize(None))
    for first, last in _day_runs(np.unique(days[windy])):
        rows = np.flatnonzero(windy & (days >= first) & (days <= last))
        span = (days >= first) & (days <= last)
        e = entry("wind_stow", "plant", str(local[rows[0]])[:16],
                  str(local[rows[-1]] + pd.Timedelta(minutes=interval_min))[:16], site.tz,
                  {"stow_wind_speed_ms": limit, "stated": spec.tracker.stow_stated,
                   "note": "rows flat in high wind: the tracker's design, not a fault"},
                  float(kept[span].sum() * h))
        out.append({**e, "design": True})
    return out


def _day_runs(days: np.ndarray) -> list[tuple[np.datetime64, np.datetime64]]:
    """(first, last) of runs of sorted days, joining runs one day apart."""
    out: list[list[np.datetime64]] = []
    for d in days:
        if out and d - out[-1][1] <= np.timedelta64(2, "D"):
            out[-1][1] = d
        else:
            out.append([d, d])
    return [(a, b) for a, b in out]


def apply_derate(spec: PlantSpec, site: Site, times: pd.DatetimeIndex, plant: Plant,
                 interval_min: int) -> tuple[Plant, list[dict]]:
    """The inverter limited below its rating in the derate window; its truth entry."""
    d = spec.derate
    if d is None:
        return plant, []
    i = [inv.id for inv in site.inverters].index(d.inverter)
    inside = window(times, d.start, d.end, site.tz)
    ac = plant.ac.copy()
    ac[i] = np.where(inside, np.minimum(ac[i], d.limit_kw * 1000), ac[i])
    lost = float((plant.ac[i] - ac[i]).sum() * interval_min / 60 / 1000)
    return Plant(ac=ac, ac_unlimited=plant.ac_unlimited), [entry(
        "clipping", f"inverter:{d.inverter}", d.start, d.end, site.tz,
        {"limit_kw": d.limit_kw, "ac_kw": site.inverter(d.inverter).ac_kw,
         "note": "inverter derated below its rating (applied after the other faults)"}, lost)]


def shading_start(entries: list[dict], daily: pd.DataFrame, tz: Any) -> None:
    """Move the shading entry's start to the first day its loss exceeds 1 % of the inverter's
    daily energy (the day the scorer's 30-day window is measured from)."""
    for e in entries:
        if e["kind"] != "shading":
            continue
        inv = e["scope"].split(":", 1)[1]
        d = daily[daily["inverter_id"] == inv]
        over = d[d["loss_shading_kwh"] > 0.01 * d["clean_energy_kwh"]]
        if len(over):
            e["parameters"]["loss_visible_from_first_interval"] = e["start"]
            e["start"] = iso(pd.Timestamp(over["date"].iloc[0]).tz_localize(tz), tz)


ENERGY_KINDS = ("outage", "partial_outage", "clipping", "curtailment", "soiling", "shading",
                "degradation", "tracker_stall", "tracker_out_of_step")


def effective_fault(e: dict) -> bool:
    """False for an energy fault that cost nothing (an export setpoint or a derate the plant
    never reached): it did not happen, and the truth lists it apart, under ``inactive``."""
    return e.get("design", False) or e["kind"] not in ENERGY_KINDS or e["energy_loss_kwh"] > 0.01


def monthly_truth(site: Site, times: pd.DatetimeIndex, ph: Physics, plant: Plant,
                  interval_min: int) -> list[dict]:
    """True plant PR per month at the export meter (IEC 61724-1: the plant's final yield is
    the energy delivered there): AC energy less the meter's AC loss over DC-rating-weighted
    true POA irradiation; ``pr_inverters`` is the same at the inverters."""
    h = interval_min / 60 / 1000
    ref = sum(arr.dc_kwp * ph.poa[inv.id][k][0] for inv in site.inverters
              for k, arr in enumerate(inv.arrays))
    month = np.asarray(times.tz_convert(site.tz).strftime("%Y-%m"), dtype=object)
    frame = pd.DataFrame({"month": month, "energy": plant.ac.sum(axis=0) * h, "ref": ref * h})
    out = []
    for m, g in frame.groupby("month", sort=True):
        pr = float(g["energy"].sum() / g["ref"].sum())
        out.append({"month": m, "energy_kwh": round(float(g["energy"].sum()), 3),
                    "reference_kwh": round(float(g["ref"].sum()), 3),
                    "pr": round(pr * (1 - METER_AC_LOSS_PCT / 100), 5),
                    "pr_inverters": round(pr, 5)})
    return out


def _write_loggers(out: Path, spec: PlantSpec, site: Site, times: pd.DatetimeIndex,
                   label: pd.DatetimeIndex, keep: np.ndarray, r: Any,
                   angle: np.ndarray | None = None) -> None:
    semi = spec.csv_style == "semicolon"
    sep = ";" if semi else ","
    local = label.tz_convert(site.tz)
    cols = [np.asarray(local.strftime("%d.%m.%Y %H:%M" if semi else "%Y-%m-%d %H:%M"),
                       dtype=object)]
    cols += [fmt(p, 3, semi) for p in r.power_kw] + [fmt(r.register_kwh, 2, semi)]
    header = ["time"] + [f"P_{inv.id}" for inv in site.inverters] + ["E_meter"]
    if spec.has_poa:
        cols += [fmt(r.poa, 1, semi), fmt(r.temp_module, 1, semi)]
        header += ["G_poa", "T_mod"]
    lines = np.array([sep.join(row) for row in zip(*cols, strict=True)], dtype=object)
    month = np.asarray((local - pd.Timedelta(minutes=spec.interval_min)).strftime("%Y-%m"),
                       dtype=object)
    for m in sorted(set(month[keep])):
        body = lines[keep & (month == m)]
        (out / f"{MAIN_LOGGER}_{m}.csv").write_text(
            sep.join(header) + "\n" + "".join(s + "\n" for s in body), encoding="utf-8")
    start = times.tz_convert(site.tz)
    stamp = [s[:-2] + ":" + s[-2:] for s in start.strftime("%Y-%m-%dT%H:%M:%S%z")]
    wcols = [np.array(stamp, dtype=object)]
    wheader = ["time"]
    if spec.has_ghi:
        wcols.append(fmt(r.ghi, 1, False))
        wheader.append("ghi")
    wcols += [fmt(r.temp_air, 1, False), fmt(r.wind_speed, 1, False)]
    wheader += ["tamb", "wind"]
    if angle is not None:  # the first inverter's rows, as their inclinometer reads
        wcols.append(fmt(angle, 1, False))
        wheader.append("angle")
    wlines = np.array([",".join(row) for row in zip(*wcols, strict=True)], dtype=object)
    wmonth = np.asarray(start.strftime("%Y-%m"), dtype=object)
    for m in sorted(set(wmonth)):
        (out / f"{STATION}_{m}.csv").write_text(
            ",".join(wheader) + "\n" + "".join(s + "\n" for s in wlines[wmonth == m]),
            encoding="utf-8")


def faults_of(spec: PlantSpec) -> Faults:
    """The demo's fault schedule filled with this plant's faults."""
    return replace(NO_FAULTS, degradation_pct_per_year=spec.degradation_pct_per_year,
                   soiling=spec.soiling, tree=spec.tree, string_loss=spec.string_loss,
                   outage=spec.outage, curtailment=spec.curtailment, clock=spec.clock,
                   poa_sensor=() if spec.sensor is None else (spec.sensor,))


def generate_plant(out_dir: str | Path, index: int, seed: int) -> Path:
    """Write plant ``index`` of the suite with ``seed`` into ``out_dir``; returns site.toml."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    for old in [*out.glob("*.csv"), out / "truth.json"]:
        old.unlink(missing_ok=True)
    spec = draw_plant(index, seed)
    clim = climate(spec.climate)
    _, meta = read_typical_year(clim)
    lat, lon, alt = (round(float(meta[k]), 3) for k in ("latitude", "longitude", "altitude"))
    (out / "site.toml").write_text(site_text(spec, lat, lon, alt, clim.timezone),
                                   encoding="utf-8")
    site = load_site(out / "site.toml")
    weather_rng, sensor_rng, dhi_rng = (np.random.default_rng(s) for s in
                                        np.random.SeedSequence([seed, index, 1]).spawn(3))
    t0 = pd.Timestamp(spec.start).tz_localize(site.tz)
    times = pd.date_range(t0, t0 + pd.Timedelta(days=spec.days), freq=f"{spec.interval_min}min",
                          inclusive="left").tz_convert("UTC").as_unit("ns")
    w = make_weather(site, clim, times, spec.interval_min, weather_rng)
    limit = stow_limit(spec, w) if spec.tracker else None
    if spec.tracker and spec.tracker.stow_stated:  # the site file states the limit
        (out / "site.toml").write_text(site_text(spec, lat, lon, alt, clim.timezone, limit),
                                       encoding="utf-8")
        site = load_site(out / "site.toml")
    rot = rotations(spec, site, times, w, limit, spec.tracker_faults) if spec.tracker else None
    ph = make_physics(spec, site, times, w, rot)
    faults = faults_of(spec)
    plant, daily, entries = energy_truth(site, ph, faults, spec.interval_min)
    if spec.tracker:
        entries += tracker_truth(spec, site, times, w, limit, ph, faults, spec.interval_min)
    clean_kwh = float(daily["clean_energy_kwh"].sum())
    plant, derate = apply_derate(spec, site, times, plant, spec.interval_min)
    entries += derate
    shading_start(entries, daily, site.tz)
    r, sensor_truth = sensor_readings(site, times, w, ph, plant, faults, sensor_rng, dhi_rng,
                                      spec.interval_min, 0.002)
    label, keep, clock_truth = _main_labels(site, times, faults, spec.interval_min)
    # a clock set back writes labels it has used before: the logger overwrites nothing
    keep &= np.asarray(label > np.maximum.accumulate(np.concatenate(
        [[label[0] - pd.Timedelta(days=1)], label[:-1]])))
    for e in sensor_truth:  # the demo's entries name the demo's logger and column
        e["parameters"].update(logger=MAIN_LOGGER, sensor="G_poa")
    for e in clock_truth:
        e["parameters"].update(logger=MAIN_LOGGER, mode=spec.clock_mode)
    entries += sensor_truth + clock_truth
    angle = rot[spec.inverters[0].id] + sensor_rng.normal(0.0, 0.2, len(times)) \
        if spec.tracker and spec.tracker.angle_channel else None
    _write_loggers(out, spec, site, times, label, keep, r, angle)
    h = spec.interval_min / 60 / 1000
    truth = {
        "scenario": {"suite_plant": index, "seed": seed, "generator_version": GENERATOR_VERSION,
                     "site": site.name, "climate": spec.climate, "design": spec.design,
                     "interval_min": spec.interval_min, "days": spec.days,
                     "start": iso(times[0], site.tz),
                     "end": iso(times[-1] + (times[1] - times[0]), site.tz),
                     "fault_kinds": list(spec.kinds), "faults": bool(spec.kinds),
                     "has_poa_sensor": spec.has_poa, "has_ghi": spec.has_ghi,
                     "tracker": asdict(spec.tracker) if spec.tracker else None,
                     "stow_wind_speed_ms": limit},
        "truth_physics": asdict(spec.physics),
        "totals": {"clean_energy_kwh": round(clean_kwh, 3),
                   "energy_kwh": round(float(plant.ac.sum() * h), 3),
                   "by_inverter_kwh": {inv.id: round(float(plant.ac[i].sum() * h), 3)
                                       for i, inv in enumerate(site.inverters)}},
        "faults": [e for e in entries if effective_fault(e)],
        "inactive": [e for e in entries if not effective_fault(e)],
        "monthly": monthly_truth(site, times, ph, plant, spec.interval_min),
    }
    (out / "truth.json").write_text(json.dumps(truth, indent=1) + "\n", encoding="utf-8")
    return out / "site.toml"
