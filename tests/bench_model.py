"""Benchmark section "model" for ``tests/benchmark.py``: the expected series for a site-year.

A 1-minute year (525,600 intervals) of invented GHI, temperature and wind for a site with four
inverters in two orientations (south 30 degrees, and west 15 degrees), modelled from GHI
(Erbs, Perez, SAPM, Dobos 2014). Printed: the bare pvlib sun position (SPA, numpy) plus Perez
transposition of the same timestamps, the perfcheck model on the same data in memory and as the
full stage (read readings from DuckDB, model, write, align), the ratio of each to the bare
pvlib run, a second run with no new readings, and peak memory. Targets: ratio <= 1.5, peak
memory <= 1.5 GB. Each measurement runs in its own process (its own peak memory).
"""

from __future__ import annotations

import importlib
import multiprocessing as mp
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
from benchmark import INVERTER, MINUTES_PER_YEAR, in_child, peak_kb

LAT, LON, ALT = 47.5, 8.7, 450.0

SITE = """
[site]
name = "Benchmark meadow"
latitude_deg = 47.5
longitude_deg = 8.7
altitude_m = 450
timezone = "Europe/Zurich"
commissioned = 2024-01-01
{inverters}
[[loggers]]
name = "minute"
interval_min = 1
[loggers.time]
columns = ["ts"]
kind = "utc"
[[loggers.columns]]
name = "GHI"
quantity = "ghi"
unit = "W/m2"
[[loggers.columns]]
name = "TA"
quantity = "temp_air"
unit = "C"
[[loggers.columns]]
name = "WS"
quantity = "wind_speed"
unit = "m/s"
"""

def _times() -> pd.DatetimeIndex:
    return pd.date_range("2024-01-01", periods=MINUTES_PER_YEAR, freq="min", tz="UTC")


def _ghi(times: pd.DatetimeIndex) -> np.ndarray:
    import pvlib

    cs = pvlib.clearsky.haurwitz(
        pvlib.solarposition.ephemeris(times, LAT, LON)["apparent_zenith"])["ghi"]
    rng = np.random.default_rng(7)
    return cs.to_numpy() * rng.uniform(0.3, 1.0, len(times))


def write_site(folder: Path) -> Path:
    invs = [INVERTER.format(i=i, tilt=t, az=a)
            for i, (t, a) in enumerate([(30, 180), (30, 180), (15, 270), (15, 270)], 1)]
    path = folder / "site.toml"
    path.write_text(SITE.format(inverters="".join(invs)))
    return path


def write_readings(site_path: str, db_path: str) -> None:
    """Store the invented year straight into the ingest tables (ingest has its own bench)."""
    from perfcheck import db

    times = _times()
    con = db.connect(db_path)
    rng = np.random.default_rng(8)
    cols = {"ghi_wm2": _ghi(times), "temp_air_c": rng.uniform(-5, 30, len(times)),
            "wind_speed_ms": rng.uniform(0, 6, len(times))}
    con.execute("INSERT INTO source_files VALUES (1, 'bench', 'minute', '', 0, 0, 0, 0, 0, 0, "
                "NULL, NULL, now(), 'bench')")
    con.execute("INSERT INTO loggers (logger_id, name, interval_min) VALUES (1, 'minute', 1)")
    for cid, (quantity, values) in enumerate(cols.items(), 1):
        con.execute("INSERT INTO channels VALUES (?, ?, 'site')", [cid, quantity])
        con.execute("INSERT INTO logger_channels VALUES (1, ?)", [cid])
        part = pd.DataFrame({"ts": times, "channel_id": cid, "value": values, "file_id": 1,
                             "line": np.arange(len(times)) + 2})
        con.register("_part", part)
        con.execute("INSERT INTO reading_values SELECT * FROM _part")
        con.unregister("_part")
    con.close()


def _bare(site_path: str, db_path: str, out: mp.Queue) -> None:
    import pvlib

    times = _times()
    mid = times + pd.Timedelta(seconds=30)
    ghi = pd.Series(_ghi(times), index=mid)
    pressure = pvlib.atmosphere.alt2pres(ALT)
    t0 = time.perf_counter()
    sp = pvlib.solarposition.get_solarposition(mid, LAT, LON, ALT, pressure=pressure,
                                               method="nrel_numpy")
    t1 = time.perf_counter()
    comps = pvlib.irradiance.erbs(ghi, sp["zenith"], mid)  # input for Perez, not timed
    t2 = time.perf_counter()
    pvlib.irradiance.get_total_irradiance(
        30, 180, sp["apparent_zenith"], sp["azimuth"], comps["dni"], ghi, comps["dhi"],
        dni_extra=pvlib.irradiance.get_extra_radiation(mid),
        airmass=pvlib.atmosphere.get_relative_airmass(sp["apparent_zenith"]), model="perez")
    t3 = time.perf_counter()
    out.put(((t1 - t0) + (t3 - t2), peak_kb()))


def _in_memory(site_path: str, db_path: str, out: mp.Queue) -> None:
    from perfcheck import db, model
    from perfcheck.site import load_site

    site = load_site(site_path)
    con = db.connect(db_path)
    weather = model.load_weather(con, 60, pd.Timestamp("2024-01-01", tz="UTC"),
                                 pd.Timestamp("2025-01-01", tz="UTC"))
    con.close()
    t0 = time.perf_counter()
    sun = model.site_sun(weather.index, site, 60)
    exp = model.expected_power(weather, sun, site)
    elapsed = time.perf_counter() - t0
    assert len(exp) == 4 * MINUTES_PER_YEAR
    out.put((elapsed, peak_kb()))


def _stage(site_path: str, db_path: str, out: mp.Queue) -> None:
    from perfcheck import db, model
    from perfcheck.site import load_site

    site = load_site(site_path)
    con = db.connect(db_path)
    t0 = time.perf_counter()
    res = model.run(con, site)
    con.execute("CHECKPOINT")
    first = time.perf_counter() - t0
    assert res["rows"] == 4 * MINUTES_PER_YEAR, res
    t0 = time.perf_counter()
    res = model.run(con, site)
    second = time.perf_counter() - t0
    assert res["rows"] == 0, res
    out.put(((first, second), peak_kb()))


def bench(print_row: Callable[[str, str], None]) -> None:
    here = str(Path(__file__).resolve().parent)
    if here not in sys.path:  # the children import this module by name
        sys.path.insert(0, here)
    me = importlib.import_module("bench_model")  # picklable targets, also when loaded by path
    with tempfile.TemporaryDirectory() as tmp:
        site = write_site(Path(tmp))
        db_path = str(Path(tmp) / "site.duckdb")
        write_readings(str(site), db_path)
        print_row("model: data", f"{MINUTES_PER_YEAR} 1-min intervals, 4 inverters, "
                  "2 orientations, from GHI")
        bare_s, bare_kb = in_child(me._bare, str(site), db_path)
        mem_s, mem_kb = in_child(me._in_memory, str(site), db_path)
        (run_s, again_s), run_kb = in_child(me._stage, str(site), db_path)
        print_row("model: bare pvlib SPA + Perez", f"{bare_s:.2f} s, peak {bare_kb / 1024:.0f} MB")
        print_row("model: perfcheck model (in memory)",
                  f"{mem_s:.2f} s, peak {mem_kb / 1024:.0f} MB, ratio {mem_s / bare_s:.2f} "
                  "(target <= 1.5)")
        print_row("model: perfcheck model run (DuckDB)",
                  f"{run_s:.2f} s incl. reading, writing, aligning; peak {run_kb / 1024:.0f} MB "
                  f"(target <= 1536 MB), ratio {run_s / bare_s:.2f}")
        print_row("model: second run, no new readings", f"{again_s:.3f} s (nothing recomputed)")


if __name__ == "__main__":
    bench(lambda label, value: print(f"{label:<40} {value}", flush=True))
