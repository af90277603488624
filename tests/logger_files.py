"""Helpers for the tests: a small site file plus a logger file written in tmp_path.

``write_case`` writes ``site.toml`` with one inverter ``INV1`` and one ``[[loggers]]`` entry
built from keyword arguments, and a logger file whose body is given as text (or bytes, to test
encodings and line ends). Tests change only what their habit needs. ``checked`` ingests such a
case into a fresh database and runs the quality stage on it.
"""

from __future__ import annotations

from pathlib import Path

from perfcheck import db, quality
from perfcheck.ingest import ingest_files
from perfcheck.site import load_site

SITE = """\
[site]
name = "Test field"
latitude_deg = 48.0
longitude_deg = 11.0
altitude_m = 500
timezone = "{timezone}"
commissioned = 2023-05-01

[[inverters]]
id = "INV1"
ac_kw = 10
[[inverters.arrays]]
dc_kwp = 12
tilt_deg = 30
azimuth_deg = 180
gamma_pct_per_c = -0.37
strings = 2

[[inverters]]
id = "INV2"
ac_kw = 10
[[inverters.arrays]]
dc_kwp = 12
tilt_deg = 30
azimuth_deg = 90
gamma_pct_per_c = -0.37
strings = 2
"""

# (name, quantity, unit, inverter or None)
DEFAULT_COLUMNS = (("P", "ac_power", "kW", "INV1"), ("G", "poa", "W/m2", None))


def _toml_value(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return repr(v)


def logger_toml(
    *,
    name: str = "main",
    match: str = "*.csv",
    interval_min: int = 5,
    time_columns: tuple[str, ...] = ("ts",),
    time_kind: str = "utc",
    time_format: str | None = "%Y-%m-%d %H:%M",
    label: str = "start",
    columns: tuple[tuple, ...] = DEFAULT_COLUMNS,
    **keys: object,
) -> str:
    """A [[loggers]] entry; extra keyword arguments become keys of the entry (delimiter, ...)."""
    lines = ["[[loggers]]", f"name = {_toml_value(name)}", f"match = {_toml_value(match)}",
             f"interval_min = {interval_min}"]
    lines += [f"{k} = {_toml_value(v)}" for k, v in keys.items()]
    lines += ["[loggers.time]", f"columns = {_toml_value(list(time_columns))}",
              f"kind = {_toml_value(time_kind)}", f"label = {_toml_value(label)}"]
    if time_format is not None and time_kind in ("utc", "local"):
        lines.append(f"format = {_toml_value(time_format)}")
    for col, quantity, unit, inverter in columns:
        lines += ["[[loggers.columns]]", f"name = {_toml_value(col)}",
                  f"quantity = {_toml_value(quantity)}", f"unit = {_toml_value(unit)}"]
        if inverter is not None:
            lines.append(f"inverter = {_toml_value(inverter)}")
    return "\n".join(lines) + "\n"


def write_case(
    tmp_path: Path,
    body: str | bytes,
    *,
    filename: str = "log.csv",
    timezone: str = "Europe/Berlin",
    loggers: str | None = None,
    **logger_keys: object,
) -> tuple[Path, Path]:
    """Write site.toml and one logger file; returns (site path, logger file path)."""
    site = tmp_path / "site.toml"
    site.write_text(SITE.format(timezone=timezone) + "\n"
                    + (loggers if loggers is not None else logger_toml(**logger_keys)))
    log = tmp_path / filename
    log.write_bytes(body if isinstance(body, bytes) else body.encode("utf-8"))
    return site, log


def run_ingest(site: Path, *files: Path | str, db: Path | None = None):
    """``perfcheck ingest`` through click's CliRunner; returns the click Result."""
    from click.testing import CliRunner

    from perfcheck.cli import main

    args = ["ingest", str(site), *map(str, files)] + (["--db", str(db)] if db else [])
    return CliRunner().invoke(main, args)


def checked(tmp_path: Path, site_path: Path, log: Path) -> tuple:
    """The case of ``write_case`` ingested into ``tmp_path/site.duckdb`` and passed through the
    quality stage: (the ingest results, the quality stage's counts, the connection, the site)."""
    site = load_site(site_path)
    con = db.connect(tmp_path / "site.duckdb")
    results = ingest_files(con, site, [log])
    return results, quality.run(con, site), con, site
