"""Invented sites and aligned series with known truth, for the metrics and capacity tests.

The series follow the shape of ``perfcheck.align.load_aligned``; the system behind them is the
linear temperature model (Dobos 2014) times a known performance factor, so every metric has a
known true value. Invented data: no real plant.
"""

from __future__ import annotations

import copy
import datetime as dt
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd
import pvlib

from perfcheck import db
from perfcheck.site import Site, parse_site

BASE: dict[str, Any] = {
    "site": {
        "name": "Testfeld Hollerbach",
        "latitude_deg": 48.1,
        "longitude_deg": 11.6,
        "altitude_m": 520.0,
        "timezone": "Europe/Berlin",
        "commissioned": dt.date(2025, 1, 1),
    },
    "inverters": [
        {
            "id": "WR1",
            "ac_kw": 90.0,
            "arrays": [{"dc_kwp": 100.0, "tilt_deg": 30.0, "azimuth_deg": 180.0,
                        "gamma_pct_per_c": -0.4, "strings": 10}],
        }
    ],
    "loggers": [
        {
            "name": "main",
            "interval_min": 15,
            "time": {"columns": ["ts"], "kind": "iso"},
            "columns": [{"name": "P1", "quantity": "ac_power", "unit": "W", "inverter": "WR1"}],
        }
    ],
}

COLUMNS = [
    "ts", "inverter_id", "interval_s", "measured_ac_w", "expected_ac_w", "potential_ac_w",
    "expected_dc_w", "poa_wm2", "poa_modelled_wm2", "poa_source", "ghi_wm2", "clearsky_ghi_wm2",
    "temp_air_c", "wind_speed_ms", "temp_module_c", "temp_cell_c", "rain_mm", "sun_zenith_deg",
    "sun_azimuth_deg", "flags", "expected_ac_modelled_w", "potential_ac_modelled_w",
    "temp_cell_modelled_c",
]


def site_raw(
    n_inverters: int = 1,
    metrics: dict[str, Any] | None = None,
    tilts: list[float] | None = None,
    model: dict[str, Any] | None = None,
    **site: Any,
) -> dict[str, Any]:
    """The raw site document: ``n_inverters`` copies of 100 kWp / 90 kW, optional [metrics]
    and [model] tables, ``site`` keys overriding [site]."""
    raw = copy.deepcopy(BASE)
    raw["site"].update(site)
    inv0 = raw["inverters"][0]
    raw["inverters"] = []
    for k in range(n_inverters):
        inv = copy.deepcopy(inv0)
        inv["id"] = f"WR{k + 1}"
        if tilts:
            inv["arrays"][0]["tilt_deg"] = tilts[k]
        raw["inverters"].append(inv)
    if metrics is not None:
        raw["metrics"] = metrics
    if model is not None:
        raw["model"] = model
    return raw


def make_site(path: Path | None = None, **kwargs: Any) -> Site:
    """The invented site (see :func:`site_raw`) without a file."""
    return parse_site(site_raw(**kwargs), path or Path("hollerbach.toml"))


def write_site(path: Path, **kwargs: Any) -> Path:
    """The invented site (see :func:`site_raw`) as a TOML file at ``path``."""
    path.write_text(_toml(site_raw(**kwargs)), encoding="utf-8")
    return path


def _toml(doc: dict[str, Any], prefix: str = "") -> str:
    def value(v: Any) -> str:
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return str(v) if not isinstance(v, dt.date) else v.isoformat()

    lines, subs = [], []
    for k, v in doc.items():
        if isinstance(v, dict):
            subs.append(f"\n[{prefix}{k}]\n" + _toml(v, f"{prefix}{k}."))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            subs.extend(f"\n[[{prefix}{k}]]\n" + _toml(x, f"{prefix}{k}.") for x in v)
        else:
            lines.append(f"{k} = {value(v)}")
    return "\n".join(lines) + "\n" + "".join(subs)


def connect_with(
    aligned: pd.DataFrame, flags: pd.DataFrame | None = None, path: str | Path = ":memory:"
) -> duckdb.DuckDBPyConnection:
    """A database (in memory by default) with every stage's schema, the rows in
    ``aligned_base`` (so the align stage's ``aligned`` view serves them) and optional quality
    ``flags`` rows (ts, quantity, device, flag)."""
    con = db.connect(path)
    # the modelled irradiance's sensitivity and range to the decomposition, where a test gives it
    extra = [c for c in ("poa_dni_sensitivity_wm2", "poa_beam_range_wm2") if c in aligned]
    frame = aligned[[c for c in COLUMNS if c != "flags"] + extra].assign(model_run_id=1)
    con.register("_aligned_frame", frame)
    cols = ", ".join(frame.columns)
    con.execute(f"INSERT INTO aligned_base ({cols}) SELECT {cols} FROM _aligned_frame")
    con.unregister("_aligned_frame")
    con.execute("INSERT INTO align_state VALUES (1, 0)")
    # the 15-minute logger of site_raw, as the ingest stores it
    con.execute("INSERT INTO loggers (logger_id, name, interval_min) VALUES (1, 'main', 15)")
    con.execute("INSERT INTO channels VALUES (1, 'ac_power_w', 'WR1')")
    con.execute("INSERT INTO logger_channels VALUES (1, 1)")
    if flags is not None:
        con.register("_flags_frame", flags.assign(detail=""))
        con.execute("INSERT INTO flags SELECT ts, quantity, device, flag, detail FROM _flags_frame")
        con.unregister("_flags_frame")
    return con


def synthetic_aligned(
    site: Site,
    start: str,
    end: str,
    freq: str = "15min",
    seed: int = 1,
    performance: float = 0.85,
    noise: float = 0.01,
    temp_mean_c: float = 12.0,
    temp_swing_c: float = 12.0,
    cloudiness: float = 0.3,
) -> pd.DataFrame:
    """Aligned rows for every interval and inverter of ``[start, end)`` (UTC dates).

    Truth: measured = performance * P0 * G/1000 * (1 + gamma (T_cell - 25)) * (1 + noise e),
    e standard normal per interval; expected is the same without noise and with performance
    0.85 fixed, so the true EPI is performance / 0.85; the modelled-POA expected power and
    cell temperature equal the normal ones (sensor and model agree). Irradiance is Haurwitz
    clear sky times a random daily cloud factor; air temperature has a yearly and a daily cycle.
    """
    rng = np.random.default_rng(seed)
    step = pd.Timedelta(freq)
    ts = pd.date_range(start, end, freq=freq, inclusive="left", tz="UTC")
    mid = ts + step / 2
    sun = pvlib.solarposition.get_solarposition(mid, site.latitude_deg, site.longitude_deg)
    zen = sun["apparent_zenith"].to_numpy()
    ghi_clear = pvlib.clearsky.haurwitz(sun["apparent_zenith"])["ghi"].to_numpy()
    days = (ts - ts[0]).days
    n_days = int(days.max()) + 1
    cloud = 1.0 - cloudiness * rng.random(n_days)
    ghi = ghi_clear * cloud[days]
    poa = ghi * 1.1
    doy = ts.day_of_year.to_numpy()
    hour = ts.hour.to_numpy() + ts.minute.to_numpy() / 60.0
    temp_air = (temp_mean_c + temp_swing_c * np.cos(2 * np.pi * (doy - 200) / 365.0)
                + 4.0 * np.sin(2 * np.pi * (hour - 9) / 24.0))
    wind = 2.0 + rng.random(len(ts))
    temp_cell = temp_air + poa / 1000.0 * 25.0
    frames = []
    for inv in site.inverters:
        gamma = inv.arrays[0].gamma_pct_per_c / 100.0
        dc = inv.dc_kwp * 1000.0 * poa / 1000.0 * (1 + gamma * (temp_cell - 25.0))
        expected_unlimited = 0.85 * dc
        expected = np.minimum(expected_unlimited, inv.ac_kw * 1000.0)
        measured = np.minimum(performance * dc * (1 + noise * rng.standard_normal(len(ts))),
                              inv.ac_kw * 1000.0)
        frames.append(pd.DataFrame({
            "ts": ts, "inverter_id": inv.id, "interval_s": step.total_seconds(),
            "measured_ac_w": measured, "expected_ac_w": expected,
            "potential_ac_w": expected_unlimited, "expected_dc_w": dc, "poa_wm2": poa,
            "poa_modelled_wm2": poa, "poa_source": "sensor", "ghi_wm2": ghi,
            "clearsky_ghi_wm2": ghi_clear, "temp_air_c": temp_air, "wind_speed_ms": wind,
            "temp_module_c": temp_cell - 3.0, "temp_cell_c": temp_cell, "rain_mm": 0.0,
            "sun_zenith_deg": zen, "sun_azimuth_deg": sun["azimuth"].to_numpy(), "flags": "",
            "expected_ac_modelled_w": expected, "potential_ac_modelled_w": expected_unlimited,
            "temp_cell_modelled_c": temp_cell,
        }))
    return pd.concat(frames, ignore_index=True)


def utc(s: str) -> pd.Timestamp:
    return pd.Timestamp(s, tz="UTC")
