"""Invented inputs for the model and align tests: a small site file and stored readings.

Readings are written straight into the ingest tables (``channels``, ``reading_values``), so the
model can be tested without logger files. All numbers are invented (not a real plant).
"""

from __future__ import annotations

from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

from perfcheck import db
from perfcheck.site import Site, load_site

SITE_TOML = """\
[site]
name = "Brackenfold test roof"
latitude_deg = 48.0
longitude_deg = 11.0
altitude_m = 500
timezone = "Europe/Berlin"
commissioned = 2024-06-01
{site_extra}

[[inverters]]
id = "INV1"
ac_kw = 8.0
efficiency_pct = 97.0
[[inverters.arrays]]
dc_kwp = 10.0
tilt_deg = 30
azimuth_deg = 180
gamma_pct_per_c = -0.37
mounting = "open_rack"
construction = "glass_glass"
strings = 2

[[inverters]]
id = "INV2"
ac_kw = 8.0
efficiency_pct = 97.0
[[inverters.arrays]]
dc_kwp = 5.0
tilt_deg = 15
azimuth_deg = 90
gamma_pct_per_c = -0.37
strings = 1
[[inverters.arrays]]
dc_kwp = 5.0
tilt_deg = 15
azimuth_deg = 270
gamma_pct_per_c = -0.37
strings = 1

[losses]
{losses}

[model]
{model}

[[loggers]]
name = "main"
interval_min = 15
[loggers.time]
columns = ["ts"]
kind = "iso"
[[loggers.columns]]
name = "P1"
quantity = "ac_power"
unit = "W"
inverter = "INV1"
[[loggers.columns]]
name = "E2"
quantity = "energy_register"
unit = "Wh"
inverter = "INV2"
rollover = 1000000
[[loggers.columns]]
name = "G"
quantity = "ghi"
unit = "W/m2"
[[loggers.columns]]
name = "POA"
quantity = "poa"
unit = "W/m2"
[[loggers.columns]]
name = "T"
quantity = "temp_air"
unit = "C"
[[loggers.columns]]
name = "TM"
quantity = "temp_module"
unit = "C"
[[loggers.columns]]
name = "W"
quantity = "wind_speed"
unit = "m/s"
"""


def make_site(folder: Path, model: str = "", losses: str = "", site_extra: str = "") -> Site:
    """Write the test site file into ``folder`` and load it."""
    path = folder / "site.toml"
    path.write_text(SITE_TOML.format(model=model, losses=losses, site_extra=site_extra))
    return load_site(path)


def open_db(folder: Path) -> duckdb.DuckDBPyConnection:
    return db.connect(folder / "site.duckdb")


def store(con: duckdb.DuckDBPyConnection, frame: pd.DataFrame, device: str,
          file_id: int = 1, interval_min: int = 15) -> None:
    """Store the columns of ``frame`` (quantity names, index ts) as readings of ``device``,
    logged by a logger of ``interval_min`` (15, as in SITE_TOML; the ingest stores it)."""
    name = f"fixture_{interval_min}"
    found = con.execute("SELECT logger_id FROM loggers WHERE name = ?", [name]).fetchall()
    if not found:
        found = con.execute("INSERT INTO loggers (logger_id, name, interval_min) "
                            "SELECT coalesce(max(logger_id), 0) + 1, ?, ? FROM loggers "
                            "RETURNING logger_id", [name, interval_min]).fetchall()
    logger_id = found[0][0]
    for quantity in frame.columns:
        rows = con.execute("SELECT channel_id FROM channels WHERE quantity = ? AND device = ?",
                           [quantity, device]).fetchall()
        if not rows:
            cid = con.execute("SELECT coalesce(max(channel_id), 0) + 1 FROM channels"
                              ).fetchall()[0][0]
            con.execute("INSERT INTO channels VALUES (?, ?, ?)", [cid, quantity, device])
        else:
            cid = rows[0][0]
        con.execute("INSERT OR IGNORE INTO logger_channels VALUES (?, ?)", [logger_id, cid])
        s = frame[quantity].dropna()
        part = pd.DataFrame({"ts": s.index, "channel_id": cid, "value": s.to_numpy(dtype=float),
                             "file_id": file_id, "line": np.arange(len(s)) + 2})
        con.register("_part", part)
        con.execute("INSERT INTO reading_values SELECT * FROM _part")
        con.unregister("_part")


def clear_days(start: str, days: int, freq: str = "15min", scale: float = 0.8) -> pd.DataFrame:
    """Invented weather: a scaled clear-sky GHI (Ineichen), 20 C, 2 m/s."""
    import pvlib

    times = pd.date_range(start, periods=days * 96 * 15 // int(freq.removesuffix("min")),
                          freq=freq, tz="UTC")
    loc = pvlib.location.Location(48.0, 11.0, altitude=500)
    cs = loc.get_clearsky(times + pd.Timedelta(freq) / 2)
    return pd.DataFrame({"ghi_wm2": cs["ghi"].to_numpy() * scale, "temp_air_c": 20.0,
                         "wind_speed_ms": 2.0}, index=times)
