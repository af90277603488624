"""Weather of the suite's plants from the typical-year files that pvlib ships in its package.

Three climates, read with pvlib's readers from ``pvlib/data`` (nothing is downloaded): a humid
subtropical inland site (TMY3 723170, Greensboro NC), a maritime subarctic coast (TMY3 703165,
Sand Point AK) and a tropical coast (TMY2 12839, Miami FL). The plants placed there are
invented; only the weather is the typical year's.

From hourly means to the logger interval: the hourly beam and diffuse clearness (DNI over
clear-sky DNI, DHI over clear-sky GHI, clear sky of Ineichen & Perez as in the demo) are
interpolated between hour mid-points and multiplied by the clear sky of the interval; on
broken-cloud hours the beam gets an AR(1) flicker so sub-hourly loggers see cloud edges.
GHI = DHI + DNI cos(zenith). Temperature and wind are interpolated. A second year repeats the
typical year with a day-to-day scaling of the beam (the typical year is one year; this keeps
two years from being identical). Rain comes from the demo's shower generator, driven by day
types taken from the daily clearness.

References
----------
S. Wilcox, W. Marion, 2008, "Users Manual for TMY3 Data Sets", NREL/TP-581-43156.
W. Marion, K. Urban, 1995, "User's Manual for TMY2s", NREL/TP-463-7668.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pvlib

from perfcheck.scenario.weather import Weather, _ar1, _clear_sky, _rain
from perfcheck.site import Site


@dataclass(frozen=True)
class Climate:
    key: str
    file: str
    timezone: str  # an IANA zone with summer time, for the loggers' local clocks


CLIMATES = (
    Climate("greensboro", "723170TYA.CSV", "America/New_York"),
    Climate("sand_point", "703165TY.csv", "America/Anchorage"),
    Climate("miami", "12839.tm2", "America/New_York"),
)


def climate(key: str) -> Climate:
    return next(c for c in CLIMATES if c.key == key)


def read_typical_year(c: Climate) -> tuple[pd.DataFrame, dict]:
    """8760 hourly rows (``ghi``, ``dni``, ``dhi``, ``temp_air``, ``wind_speed``) in file order
    (row k: the hour ending k+1 h after local standard midnight of 1 January), and the
    metadata (``latitude``, ``longitude``, ``altitude``, ``TZ`` [h])."""
    path = os.path.join(os.path.dirname(pvlib.__file__), "data", c.file)
    if c.file.endswith(".tm2"):
        data, meta = pvlib.iotools.read_tmy2(path)
        data = data.rename(columns={"GHI": "ghi", "DNI": "dni", "DHI": "dhi",
                                    "DryBulb": "temp_air", "Wspd": "wind_speed"})
        # TMY2 writes temperature in tenths of a degree C and wind in tenths of m/s
        data[["temp_air", "wind_speed"]] = data[["temp_air", "wind_speed"]] / 10.0
    else:
        data, meta = pvlib.iotools.read_tmy3(path, map_variables=True)
    cols = ["ghi", "dni", "dhi", "temp_air", "wind_speed"]
    return data[cols].astype(float).reset_index(drop=True), meta


def _hour_position(times: pd.DatetimeIndex, tz_hours: float, interval_min: int) -> np.ndarray:
    """Position of each interval's mid-point in the typical year's hourly rows (row k is the
    mean over the hour centred k + 0.5 h after standard midnight of 1 January)."""
    std = (times + pd.Timedelta(minutes=interval_min / 2)).tz_convert("UTC").tz_localize(None) \
        + pd.Timedelta(hours=tz_hours)
    # the typical year has no 29 February: that day repeats the 28th
    doy = np.where(std.is_leap_year & (std.month > 2), std.dayofyear - 2, std.dayofyear - 1)
    doy = np.where(std.is_leap_year & (std.month == 2) & (std.day == 29), 58, doy)
    hours = std.hour + std.minute / 60 + std.second / 3600
    return np.asarray(doy * 24 + hours - 0.5, dtype=float)


def make_weather(site: Site, c: Climate, times: pd.DatetimeIndex, interval_min: int,
                 rng: np.random.Generator) -> Weather:
    """Interval-mean weather at the interval starts ``times`` (UTC) from the typical year."""
    tmy, meta = read_typical_year(c)
    solpos, ghi_cs, dni_cs, dni_extra, airmass = _clear_sky(site, times, interval_min)
    pos = _hour_position(times, float(meta["TZ"]), interval_min)
    rows = np.arange(len(tmy))
    cosz = np.clip(np.cos(np.radians(solpos["zenith"].to_numpy())), 0, None)
    # hourly clear sky from the interval clear sky, averaged over each typical-year hour
    hour = np.floor(pos + 0.5).astype(int) % len(tmy)
    cs = pd.DataFrame({"h": hour, "ghi": ghi_cs, "dni": dni_cs}).groupby("h").mean()
    cs = cs.reindex(rows).fillna(0.0)
    kb = np.where(cs["dni"] > 20, tmy["dni"] / cs["dni"].where(cs["dni"] > 20, 1.0), 0.0)
    kd = np.where(cs["ghi"] > 20, tmy["dhi"] / cs["ghi"].where(cs["ghi"] > 20, 1.0), 0.3)

    def at(x: np.ndarray) -> np.ndarray:
        return np.interp(pos, rows, np.asarray(x, dtype=float), period=len(tmy))

    kb_i, kd_i = np.clip(at(kb), 0.0, 1.1), np.clip(at(kd), 0.0, 1.2)
    local = times.tz_convert(site.tz)
    days, day_idx = np.unique(np.asarray(local.normalize().tz_localize(None).asi8),
                              return_inverse=True)
    year = np.asarray((times - times[0]).days // 365)
    scale = np.clip(rng.normal(1.0, 0.06, len(days)), 0.8, 1.2)[day_idx]
    broken = kb_i * (1 - kb_i)  # largest on half-clear hours
    flicker = 1.0 + np.where(year > 0, scale - 1.0, 0.0) + 1.2 * broken * _ar1(rng, len(times), 3.0)
    dni = np.clip(kb_i * flicker, 0.0, 1.1) * dni_cs
    dhi = kd_i * ghi_cs
    ghi = dhi + dni * cosz
    day_ghi = pd.Series(ghi).groupby(day_idx).sum().to_numpy()
    day_cs = pd.Series(ghi_cs).groupby(day_idx).sum().to_numpy()
    clearness = day_ghi / np.maximum(day_cs, 1.0)
    day_type = np.where(clearness > 0.75, 0, np.where(clearness > 0.45, 1, 2))
    return Weather(solpos=solpos, ghi=ghi, dni=dni, dhi=dhi, ghi_clear=ghi_cs, dni_clear=dni_cs,
                   temp_air=at(tmy["temp_air"]), wind_speed=np.maximum(at(tmy["wind_speed"]), 0.0),
                   rain=_rain(rng, day_type, day_idx, local, None, ()), day_type=day_type,
                   dni_extra=dni_extra, airmass=airmass)
