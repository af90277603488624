"""Sensors and logger files of the demo scenario, with the habits of real loggers.

Main logger "fl3" (invented): one file per month of interval starts, UTF-8 with BOM, CRLF, three
preamble lines, a header and a units row, ``;`` and decimal comma, naive local time with summer
time written ``DD.MM.YYYY HH:MM`` at the END of each interval (the October hour appears twice in
order, the March hour is missing), sentinels ``-9999`` and ``#N/A``; besides the four
inverters, the meter and the module sensors it logs the rotation of the tracker rows of inv4
(their inclinometer). Weather station "ws2" (invented): ``,`` and decimal point, ISO 8601 with
offset at the START of each interval, LF, 10-minute means (rain: sums), sentinel ``NaN``.
Besides GHI the station logs the diffuse horizontal irradiance (DHI) of a second pyranometer
under a shading ball on a sun tracker.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from perfcheck.scenario.faults import Faults, entry, iso, local_ts, window
from perfcheck.scenario.plant import Physics, Plant
from perfcheck.scenario.sitefile import (
    MAIN_LOGGER,
    METER_AC_LOSS_PCT,
    WEATHER_LOGGER,
    weather_factor,
)
from perfcheck.scenario.weather import Weather
from perfcheck.site import Site

PREAMBLE = (
    "Ferrantel FL-3;S/N 30-1187-42;Firmware 2.14\r\n"
    "Anlage;Solarpark Talbrunn\r\n"
    "Export;{month};Intervall {interval} min;Zeitstempel = Intervallende\r\n"
)
MAIN_HEADER = ("Zeit;P_WR1;P_WR2;P_WR3;P_WR4;E_Netz;G_Modul;T_Modul;Winkel_NF4\r\n"
               ";kW;kW;kW;kW;kWh;W/m²;°C;°\r\n")
MAIN_FIRST_DATA_LINE = 6  # 3 preamble lines, header, units row
WEATHER_HEADER = "time,ghi,tamb,wind,rain,dhi\n"
# Calibration of the two pyranometers against the truth (within a class A sensor's tolerance).
POA_CALIBRATION = 1.005
GHI_CALIBRATION = 0.996
DHI_CALIBRATION = 1.004  # the shaded pyranometer (class A tolerance; common practice)
# scatter of the tracker inclinometer [deg] (invented; well inside the +-2 deg pointing
# tolerance of trackers, common practice)
ANGLE_NOISE_DEG = 0.2


@dataclass
class Readings:
    """What the sensors report, per interval (power per inverter in rows)."""

    power_kw: np.ndarray
    power_na: np.ndarray  # the logger wrote "#N/A"
    poa: np.ndarray
    poa_sentinel: np.ndarray  # the logger wrote -9999
    ghi: np.ndarray
    dhi: np.ndarray
    dhi_nan: np.ndarray  # the station wrote NaN
    temp_module: np.ndarray
    temp_air: np.ndarray
    wind_speed: np.ndarray
    wind_nan: np.ndarray  # the station wrote NaN
    register_kwh: np.ndarray  # plant meter at the interval's end (less the AC losses)


def fmt(values: np.ndarray, decimals: int, comma: bool) -> np.ndarray:
    """Numbers as a logger writes them: fixed decimals, '0' for zero, '' for NaN."""
    r = np.round(values, decimals) + 0.0
    s = np.char.mod(f"%.{decimals}f", np.nan_to_num(r)).astype(object)
    s[r == 0] = "0"
    if comma:
        s = np.array([v.replace(".", ",") for v in s], dtype=object)
    s[np.isnan(r)] = ""
    return s


def _join(cols: list[np.ndarray], sep: str) -> np.ndarray:
    return np.array([sep.join(row) for row in zip(*cols, strict=True)], dtype=object)


def sensor_readings(
    site: Site, times: pd.DatetimeIndex, w: Weather, ph: Physics, plant: Plant, faults: Faults,
    rng: np.random.Generator, dhi_rng: np.random.Generator, interval_min: int,
    power_noise: float,
) -> tuple[Readings, list[dict]]:
    """Sensor values with noise, offsets and the sensor faults; their truth entries.

    The DHI pyranometer draws from its own stream ``dhi_rng``, so the other sensors' noise does
    not depend on it.
    """
    tz, n = site.tz, len(times)
    day = w.solpos["apparent_zenith"].to_numpy() < 90
    power = plant.ac * (1 + power_noise * rng.standard_normal(plant.ac.shape))
    power = np.where(plant.ac > 0, np.maximum(power, 0), 0.0) / 1000
    power_na = rng.random(power.shape) < 2e-4
    poa = POA_CALIBRATION * ph.poa_sensor * (1 + 0.005 * rng.standard_normal(n)) \
        + 0.4 * rng.standard_normal(n)
    poa = np.where(day, poa, -1.5 + 0.3 * rng.standard_normal(n))  # night thermal offset
    ghi = GHI_CALIBRATION * w.ghi * (1 + 0.005 * rng.standard_normal(n)) \
        + 0.4 * rng.standard_normal(n)
    ghi = np.where(day, ghi, -1.2 + 0.3 * rng.standard_normal(n))
    dhi = DHI_CALIBRATION * w.dhi * (1 + 0.005 * dhi_rng.standard_normal(n)) \
        + 0.4 * dhi_rng.standard_normal(n)
    dhi = np.where(day, dhi, -1.0 + 0.3 * dhi_rng.standard_normal(n))
    dhi_nan = dhi_rng.random(n) < 3e-4
    truth = []
    for f in faults.poa_sensor:
        inside = window(times, f.start, f.end, tz)
        if not inside.any():
            continue
        params: dict[str, Any] = {"sensor": "G_Modul", "logger": MAIN_LOGGER, "mode": f.mode}
        if f.mode == "stuck":
            value = float(np.round(poa[np.flatnonzero(inside)[0]], 1))
            poa = np.where(inside, value, poa)
            params["value_wm2"] = value
        elif f.mode == "drift":
            ramp = np.zeros(n)
            ramp[inside] = np.linspace(0.0, 1.0, int(inside.sum()))
            poa = np.where(inside, poa * (1 + (f.factor - 1) * ramp), poa)
            params.update(factor=f.factor, shape="linear from 1 to factor")
        else:
            poa = np.where(inside, poa * f.factor, poa)
            params["factor"] = f.factor
        truth.append(entry("sensor_fault", "plant", f.start, f.end, tz, params))
    poa_sentinel = rng.random(n) < 3e-4
    wind_nan = rng.random(n) < 3e-4
    temp_module = ph.temp_module + 0.3 * rng.standard_normal(n)
    temp_air = w.temp_air + 0.15 * rng.standard_normal(n)
    # the export meter counts the inverters' output less the AC losses between them
    delivered = plant.ac.sum(axis=0) * (1 - METER_AC_LOSS_PCT / 100)
    register = np.cumsum(delivered) * interval_min / 60 / 1000
    if faults.meter_reset:
        after = np.asarray(times >= local_ts(faults.meter_reset, tz))
        if after.any() and not after.all():
            register = np.where(after, register - register[~after][-1], register)
            truth.append(entry("meter_reset", "plant", faults.meter_reset, faults.meter_reset,
                               tz, {"logger": MAIN_LOGGER, "column": "E_Netz",
                                    "note": "meter replaced; the register restarts at 0"}))
    return Readings(power, power_na, poa, poa_sentinel, ghi, dhi, dhi_nan, temp_module, temp_air,
                    w.wind_speed, wind_nan, register), truth


def _main_labels(
    site: Site, times: pd.DatetimeIndex, faults: Faults, interval_min: int
) -> tuple[pd.DatetimeIndex, np.ndarray, list[dict]]:
    """Interval-end labels as the main logger's clock gives them, which rows it writes."""
    tz, n = site.tz, len(times)
    label = times + pd.Timedelta(minutes=interval_min)
    keep = np.ones(n, dtype=bool)
    truth = []
    c = faults.clock
    if c is not None and window(times, c.start, c.end, tz).any():
        shifted = window(times, c.start, c.end, tz)
        label = label.where(~shifted, label + pd.Timedelta(minutes=c.minutes))
        # once the clock is set right the logger skips labels it has already written
        last = np.flatnonzero(shifted)[-1]
        keep &= ~((np.arange(n) > last) & np.asarray(label <= label[last]))
        truth.append(entry("clock_fault", "plant", c.start, c.end, tz, {
            "logger": MAIN_LOGGER, "shift_minutes": c.minutes,
            "rows_not_written": int((~keep).sum()),
            "note": "labels late by shift_minutes; after the correction the rows whose labels "
                    "were already used were not written"}))
    return label, keep, truth


def _gaps(site: Site, times: pd.DatetimeIndex, plant: Plant, faults: Faults, logger: str,
          interval_min: int) -> tuple[np.ndarray, list[dict]]:
    """Rows the logger lost, and their truth entries."""
    keep = np.ones(len(times), dtype=bool)
    truth = []
    for g in faults.gaps:
        inside = window(times, g.start, g.end, site.tz)
        if g.logger != logger or not inside.any():
            continue
        keep &= ~inside
        params: dict[str, Any] = {"logger": logger, "rows_missing": int(inside.sum())}
        if logger == MAIN_LOGGER:
            unrecorded = float(plant.ac[:, inside].sum() * interval_min / 60 / 1000)
            params["unrecorded_kwh"] = round(unrecorded, 3)
            # what the meter register counts across the gap (it keeps counting)
            params["metered_kwh"] = round(unrecorded * (1 - METER_AC_LOSS_PCT / 100), 3)
        truth.append(entry("data_gap", "plant", g.start, g.end, site.tz, params))
    return keep, truth


def _garbage(rng: np.random.Generator, line: str) -> tuple[str, str]:
    """A damaged version of a logger line and what is wrong with it."""
    kind = int(rng.integers(0, 4))
    fields = line.split(";")
    if kind == 0:
        return ";".join(fields[:4]), "wrong field count (line cut short)"
    if kind == 1:
        fields[1 + int(rng.integers(0, 3))] = "E#17"
        return ";".join(fields), "text in a number field"
    if kind == 2:
        return ";".join(fields + ["0", "0"]), "wrong field count (extra fields)"
    return "@@@@ FL-3 BUFFER OVERRUN @@@@", "garbage line"


def _write_main(path: Path, month: str, interval_min: int, body: list[str]) -> None:
    text = (PREAMBLE.format(month=month, interval=interval_min) + MAIN_HEADER
            + "".join(s + "\r\n" for s in body))
    path.write_bytes(b"\xef\xbb\xbf" + text.encode("utf-8"))


def write_main_logger(
    out: Path, site: Site, times: pd.DatetimeIndex, w: Weather, plant: Plant, r: Readings,
    faults: Faults, rng: np.random.Generator, interval_min: int, angle: np.ndarray,
) -> list[dict]:
    """The main logger's monthly files (and one re-export); truth entries of its faults.
    ``angle``: the tracker inclinometer's reading [deg]."""
    tz = site.tz
    label, keep, truth = _main_labels(site, times, faults, interval_min)
    gap_keep, gap_truth = _gaps(site, times, plant, faults, MAIN_LOGGER, interval_min)
    keep &= gap_keep
    truth += gap_truth
    power = [fmt(p, 2, True) for p in r.power_kw]
    for col, na in zip(power, r.power_na, strict=True):
        col[na] = "#N/A"
    poa = fmt(r.poa, 1, True)
    poa[r.poa_sentinel] = "-9999"
    local = label.tz_convert(tz)
    lines = _join([np.asarray(local.strftime("%d.%m.%Y %H:%M"), dtype=object), *power,
                   fmt(r.register_kwh, 1, True), poa, fmt(r.temp_module, 1, True),
                   fmt(angle, 1, True)], ";")
    month = np.asarray((local - pd.Timedelta(minutes=interval_min)).strftime("%Y-%m"),
                       dtype=object)
    again = (window(times, *faults.reexport, tz) if faults.reexport
             else np.zeros(len(times), dtype=bool))
    day = w.solpos["apparent_zenith"].to_numpy() < 90
    years = len(times) * interval_min / (365.25 * 1440)
    n_damaged = int(round(faults.corrupt_rows_per_year * years))
    damaged = set(rng.choice(np.flatnonzero(keep & day & ~again), n_damaged,
                             replace=False).tolist()) if n_damaged else set()
    log: list[dict] = []
    sentinels = {"-9999": 0, "#N/A": 0}
    for m in sorted(set(month[keep])):
        name = f"talbrunn_fl3_{m}.csv"
        body: list[str] = []
        for i in np.flatnonzero(keep & (month == m)):
            if i in damaged:
                bad, why = _garbage(rng, lines[i])
                log.append({"file": name, "line": MAIN_FIRST_DATA_LINE + len(body),
                            "reason": why, "interval_start": iso(times[i], tz),
                            "row_lost": why != "garbage line"})
                body.append(bad)
                if why != "garbage line":
                    continue
            body.append(lines[i])
        _write_main(out / name, m, interval_min, body)
        text = "\n".join(body)
        sentinels = {k: v + text.count(k) for k, v in sentinels.items()}
    truth.append({"kind": "sentinels", "scope": "plant", "start": iso(times[0], tz),
                  "end": iso(times[-1], tz), "energy_loss_kwh": 0.0,
                  "parameters": {"logger": MAIN_LOGGER, "count": sentinels,
                                 "note": "values written instead of a reading, monthly files"}})
    idx = np.flatnonzero(keep & again)
    if len(idx):
        name = f"talbrunn_fl3_{faults.reexport[0]}_reexport.csv"
        _write_main(out / name, month[idx[0]], interval_min, list(lines[idx]))
        truth.append(entry("duplicate_export", "plant", *faults.reexport, tz, {
            "logger": MAIN_LOGGER, "file": name, "rows": int(len(idx)),
            "note": "the same rows as in the monthly file, exported a second time"}))
    if log:
        truth.append({"kind": "corrupt_rows", "scope": "plant", "start": log[0]["interval_start"],
                      "end": log[-1]["interval_start"], "energy_loss_kwh": 0.0, "parameters": {
                          "logger": MAIN_LOGGER, "rows": log,
                          "note": "line numbers count physical lines from 1 (preamble, header "
                                  "and units row included); a garbage line is inserted before "
                                  "its row, the other kinds replace the row (row_lost)"}})
    return truth


def write_weather_station(
    out: Path, site: Site, times: pd.DatetimeIndex, w: Weather, plant: Plant, r: Readings,
    faults: Faults, interval_min: int,
) -> list[dict]:
    """The weather station's monthly files: means over 10 minutes where the interval allows."""
    k = weather_factor(interval_min)
    keep, truth = _gaps(site, times, plant, faults, WEATHER_LOGGER, interval_min)
    keep = keep.reshape(-1, k).all(axis=1)

    def mean(x: np.ndarray) -> np.ndarray:
        return x.reshape(-1, k).mean(axis=1)

    local = times[::k].tz_convert(site.tz)
    stamp = [s[:-2] + ":" + s[-2:] for s in local.strftime("%Y-%m-%dT%H:%M:%S%z")]
    wind = fmt(mean(r.wind_speed), 1, False)
    wind[r.wind_nan[::k]] = "NaN"
    dhi = fmt(mean(r.dhi), 1, False)
    dhi[r.dhi_nan[::k]] = "NaN"
    lines = _join([np.array(stamp, dtype=object), fmt(mean(r.ghi), 1, False),
                   fmt(mean(r.temp_air), 1, False), wind, fmt(mean(w.rain) * k, 1, False), dhi],
                  ",")
    nan_wind, nan_dhi = (int((col == "NaN")[keep].sum()) for col in (wind, dhi))
    month = np.asarray(local.strftime("%Y-%m"), dtype=object)
    for m in sorted(set(month[keep])):
        text = WEATHER_HEADER + "".join(s + "\n" for s in lines[keep & (month == m)])
        (out / f"talbrunn_ws2_{m}.csv").write_bytes(text.encode("utf-8"))
    truth.append({"kind": "sentinels", "scope": "plant", "start": iso(times[0], site.tz),
                  "end": iso(times[-1], site.tz), "energy_loss_kwh": 0.0,
                  "parameters": {"logger": WEATHER_LOGGER,
                                 "count": {"NaN": nan_wind + nan_dhi},
                                 "columns": {"wind": nan_wind, "dhi": nan_dhi},
                                 "note": "values written instead of a reading"}})
    return truth
