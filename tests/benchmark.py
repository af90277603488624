"""Speed and memory of whole commands as a user runs them (not collected by pytest).

Run: ``python tests/benchmark.py [--only NAME] [--repeats N] [--years 1,2,4] [--quick]``
with the Python of the environment where perfcheck is installed (its ``perfcheck`` entry point,
beside that Python, is what runs).

Every figure is the wall time of a whole command in a fresh process (start-up and imports
included), started by this script, and that process's peak resident memory (``ru_maxrss`` from
``os.wait4``, the largest single process of the tree). Beside each, in the same run and
alternating with it, a reference runs in its own fresh process on the same data:

* the notebook: pandas ``read_csv``, pvlib's default solar position, SAPM cell temperature,
  PVWatts DC and AC, monthly PR and temperature-corrected PR (:data:`NOTEBOOK`);
* a bare DuckDB ``read_csv`` of the same files into a table (:data:`READ_CSV`);
* pvlib's default solar position + Erbs + Perez over the same steps (:data:`SUN_PEREZ`);
* for ``verify``: the analysis it re-runs, as commands on a fresh database.

The data are an invented 1-minute site-year (525,600 rows: one inverter's AC power, POA, GHI,
air and module temperature, wind) written by :func:`site_year`, one file per site-year.
Each figure is the median of ``--repeats`` runs. The targets are those of issue 13; the
figures (``--only NAME``, see :data:`SECTIONS`): audit, ingest, model, report, evidence, verify,
memory, years (1, 2, 4 site-years per row), stages (where the time goes: one more run of each
command, its CLI imports timed apart and the rest under cProfile), version, demo.

The command lines are in :data:`COMMANDS` (one table, edit it when the CLI changes); the whole
audit is :data:`AUDIT`, run on a fresh database in that order; :data:`PIPELINE` is the order
in which the commands run on one database (a figure runs the commands before its own).
"""

from __future__ import annotations

import argparse
import json
import os
import pstats
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

# ---------------------------------------------------------------------------------------------
# The command lines. Placeholders: {site} site file, {db} database, {data} the logger files
# (several arguments), {out} a folder of this run, {month} YYYY-MM, {first_day}/{last_day} of
# that month (YYYY-MM-DD, last day included).
COMMANDS: dict[str, list[str]] = {
    "version": ["--version"],
    "ingest": ["ingest", "{site}", "{data}", "--db", "{db}"],
    "model": ["model", "{site}", "--db", "{db}", "--quiet"],
    "check": ["check", "{site}", "--db", "{db}", "--json", "{out}/check.json"],
    "report": ["report", "{site}", "--db", "{db}", "--month", "{month}", "--out", "{out}/report"],
    "evidence": ["evidence", "{site}", "--db", "{db}", "--month", "{month}",
                 "--out", "{out}/bundle.zip"],
    "verify": ["verify", "{out}/bundle.zip"],
    "check month": ["check", "{site}", "--db", "{db}", "--from", "{first_day}",
                    "--to", "{last_day}"],
    "demo": ["demo", "--out", "{out}/demo", "--quiet"],
}
# the whole audit on a fresh database, in order, as a user runs it: check analyses the
# stored history itself when no current analysis is stored (a separate "analyse" first would
# only add a process)
AUDIT = ["ingest", "model", "check"]
PIPELINE = [*AUDIT, "report", "evidence", "verify"]  # commands in order on one database
# what verify re-runs, on a fresh database
VERIFY_REFERENCE = ["ingest", "model", "check month"]
# ---------------------------------------------------------------------------------------------

MINUTES_PER_YEAR = 525_600
QUICK_MINUTES = 31 * 1440  # --quick: a month per "site-year"
START = pd.Timestamp("2025-01-01")  # a common year: 525,600 minutes are one calendar year
MONTH, QUICK_MONTH = "2025-06", "2025-01"  # report/evidence month
SCALING_ALLOWANCE = 1.1  # per-row cost at N site-years may exceed that at one by this factor
# (an allowance for the noise of a shared machine, common practice; "flat or falling")

SITE = {"latitude_deg": 47.5, "longitude_deg": 8.7, "altitude_m": 450.0,
        "timezone": "Europe/Zurich", "ac_kw": 50.0, "dc_kwp": 60.0, "tilt_deg": 30.0,
        "azimuth_deg": 180.0, "gamma_pct_per_c": -0.37}

SITE_TOML = """\
# Invented benchmark site (written by tests/benchmark.py)
[site]
name = "Benchmark meadow"
latitude_deg = {latitude_deg}
longitude_deg = {longitude_deg}
altitude_m = {altitude_m}
timezone = "{timezone}"
commissioned = 2025-01-01

[[inverters]]
id = "INV1"
ac_kw = {ac_kw}
  [[inverters.arrays]]
  dc_kwp = {dc_kwp}
  tilt_deg = {tilt_deg}
  azimuth_deg = {azimuth_deg}
  gamma_pct_per_c = {gamma_pct_per_c}
  strings = 10

[[loggers]]
name = "minute"
match = "*.csv"
interval_min = 1
[loggers.time]
columns = ["Timestamp"]
kind = "utc"
format = "%Y-%m-%d %H:%M:%S"
{columns}
"""

COLUMNS = [  # (header, quantity, unit, inverter)
    ("P_AC", "ac_power", "kW", "INV1"),
    ("POA", "poa", "W/m2", None),
    ("GHI", "ghi", "W/m2", None),
    ("T_AMB", "temp_air", "C", None),
    ("T_MOD", "temp_module", "C", None),
    ("WIND", "wind_speed", "m/s", None),
]

# The notebook baseline: what a pandas + pvlib notebook does to get monthly PR.
NOTEBOOK = """\
import json, sys
import pandas as pd
import pvlib

p = json.loads(sys.argv[1])
df = pd.concat([pd.read_csv(f, parse_dates=["Timestamp"], index_col="Timestamp")
                for f in p["files"]])
df.index = df.index.tz_localize("UTC")
sun = pvlib.solarposition.get_solarposition(df.index, p["lat"], p["lon"], p["alt"])
params = pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"]["open_rack_glass_polymer"]
temp_cell = pvlib.temperature.sapm_cell(df["POA"], df["T_AMB"], df["WIND"], **params)
pdc = pvlib.pvsystem.pvwatts_dc(df["POA"], temp_cell, p["pdc0_w"], p["gamma_pdc"])
pac = pvlib.inverter.pvwatts(pdc, p["pac0_w"] / 0.96)
day = sun["elevation"] > 0
h = p["interval_h"]
sums = pd.DataFrame({
    "energy_kwh": df["P_AC"].where(day, 0.0) * h,
    "model_kwh": pac.where(day, 0.0) / 1000 * h,
    "yr_h": df["POA"].where(day, 0.0) / 1000 * h,
    "yr_temp_h": (df["POA"] / 1000 * (1 + p["gamma_pdc"] * (temp_cell - 25))).where(day, 0.0) * h,
}).tz_convert(p["tz"]).resample("MS").sum()
sums["pr"] = sums["energy_kwh"] / (p["pdc0_w"] / 1000 * sums["yr_h"])
sums["pr_temp_corrected"] = sums["energy_kwh"] / (p["pdc0_w"] / 1000 * sums["yr_temp_h"])
print(sums.round(3).to_string())
"""

# A bare DuckDB read of the same files into a table of a database file.
READ_CSV = """\
import json, sys
import duckdb

p = json.loads(sys.argv[1])
con = duckdb.connect(p["db"])
con.execute("CREATE TABLE raw AS SELECT * FROM read_csv(?)", [p["files"]])
con.close()
"""

# pvlib's default solar position and Perez transposition over the same steps (mid-interval).
SUN_PEREZ = """\
import json, sys
import pandas as pd
import pvlib

p = json.loads(sys.argv[1])
ghi = pd.concat([pd.read_csv(f, usecols=["Timestamp", "GHI"], parse_dates=["Timestamp"],
                             index_col="Timestamp")["GHI"] for f in p["files"]])
ghi.index = ghi.index.tz_localize("UTC") + pd.Timedelta(hours=p["interval_h"] / 2)
times = ghi.index
sp = pvlib.solarposition.get_solarposition(times, p["lat"], p["lon"], p["alt"])
parts = pvlib.irradiance.erbs(ghi, sp["zenith"], times)
poa = pvlib.irradiance.get_total_irradiance(
    p["tilt"], p["azimuth"], sp["apparent_zenith"], sp["azimuth"], parts["dni"], ghi,
    parts["dhi"], dni_extra=pvlib.irradiance.get_extra_radiation(times),
    airmass=pvlib.atmosphere.get_relative_airmass(sp["apparent_zenith"]), model="perez")
print(float(poa["poa_global"].sum()))
"""

# A command under cProfile, started after the CLI's imports (timed apart, without the profiler).
PROFILED = """\
import cProfile, marshal, sys, time
t0 = time.perf_counter()
from perfcheck.cli import main  # the entry point of [project.scripts]
startup = time.perf_counter() - t0
prof = cProfile.Profile()
code = 0
prof.enable()
try:
    main(sys.argv[2:], prog_name="perfcheck")
except SystemExit as exc:
    code = exc.code
finally:
    prof.disable()
    prof.create_stats()
    prof.stats[("<start-up>", 0, "start-up: imports of the CLI, not profiled")] = (
        1, 1, startup, startup, {})
    with open(sys.argv[1], "wb") as f:
        marshal.dump(prof.stats, f)
sys.exit(code)
"""

REFERENCES = {"notebook": NOTEBOOK, "read_csv": READ_CSV, "sun+perez": SUN_PEREZ}


# --- the invented data ---------------------------------------------------------------------

def site_year(start: pd.Timestamp, periods: int, seed: int = 0) -> pd.DataFrame:
    """Invented 1-minute logger rows of the benchmark site from ``start`` (UTC), ``periods``
    rows: plausible, not a physical simulation.

    Sun from Cooper's declination (Cooper 1969) and the hour angle of apparent solar time
    (the equation of time of Spencer 1971, Duffie & Beckman 2013, eq. 1.5.3: without it the
    power runs up to 16 minutes off the true sun, which the analysis rightly takes for a
    logger clock fault), clear-sky GHI from Haurwitz (1945), a random clearness per day,
    80 % of GHI as beam onto the south-facing plane (Duffie & Beckman 2013, eq. 1.6.7) and
    the rest isotropic, module temperature from the SAPM open-rack glass/polymer coefficients
    (King et al. 2004), AC power from PVWatts with the inverter's limit.
    """
    rng = np.random.default_rng(seed)
    ts = pd.date_range(start, periods=periods, freq="min")
    doy = ts.day_of_year.to_numpy()
    hours = (ts.hour + ts.minute / 60).to_numpy()
    lat, tilt = np.radians(SITE["latitude_deg"]), np.radians(SITE["tilt_deg"])
    decl = np.radians(23.45) * np.sin(2 * np.pi * (284 + doy) / 365)
    b = 2 * np.pi * (doy - 1) / 365
    eot_min = 229.2 * (0.000075 + 0.001868 * np.cos(b) - 0.032077 * np.sin(b)
                       - 0.014615 * np.cos(2 * b) - 0.04089 * np.sin(2 * b))
    omega = np.radians(15 * (hours + SITE["longitude_deg"] / 15 + eot_min / 60 - 12))
    cos_z = np.sin(lat) * np.sin(decl) + np.cos(lat) * np.cos(decl) * np.cos(omega)
    cos_inc = (np.sin(lat - tilt) * np.sin(decl)
               + np.cos(lat - tilt) * np.cos(decl) * np.cos(omega))
    up = cos_z > 0.01
    clear = np.where(up, 1098 * cos_z * np.exp(-0.059 / np.where(up, cos_z, 1)), 0.0)
    days = (ts.normalize() - ts[0].normalize()).days.to_numpy()
    clearness = rng.uniform(0.3, 1.0, days.max() + 1)[days]
    ghi = clear * clearness * rng.uniform(0.97, 1.03, periods)
    beam = 0.8 * ghi * np.clip(cos_inc / np.where(up, cos_z, 1), 0, 4)
    poa = np.where(up, beam + 0.2 * ghi * (1 + np.cos(tilt)) / 2, 0.0)
    t_amb = (10 - 10 * np.cos(2 * np.pi * doy / 365) - 4 * np.cos(2 * np.pi * hours / 24)
             + rng.normal(0, 0.5, periods))
    wind = rng.uniform(0, 6, periods)
    t_mod = t_amb + poa * np.exp(-3.56 - 0.075 * wind)
    gamma = SITE["gamma_pct_per_c"] / 100
    pdc = SITE["dc_kwp"] * poa / 1000 * (1 + gamma * (t_mod + 3 * poa / 1000 - 25))
    pac = np.clip(0.96 * pdc, 0, SITE["ac_kw"])
    return pd.DataFrame({"Timestamp": ts.strftime("%Y-%m-%d %H:%M:%S"),
                         "P_AC": pac.round(3), "POA": poa.round(1), "GHI": ghi.round(1),
                         "T_AMB": t_amb.round(2), "T_MOD": t_mod.round(2),
                         "WIND": wind.round(2)})


def site_toml() -> str:
    """The benchmark site file: the site of :data:`SITE`, its logger mapping :data:`COLUMNS`."""
    cols = [f'[[loggers.columns]]\nname = "{name}"\nquantity = "{quantity}"\nunit = "{unit}"'
            + (f'\ninverter = "{inverter}"' if inverter else "")
            for name, quantity, unit, inverter in COLUMNS]
    return SITE_TOML.format(columns="\n".join(cols), **SITE)


def write_data(folder: Path, units: int, rows: int) -> list[Path]:
    """The site file and ``units`` consecutive files of ``rows`` minutes each."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "site.toml").write_text(site_toml())
    files = []
    for i in range(units):
        start = START + pd.Timedelta(minutes=i * rows)
        path = folder / f"minute_{i + 1}_{start:%Y-%m-%d}.csv"
        site_year(start, rows, seed=i).to_csv(path, index=False)
        files.append(path)
    return files


# --- measuring ------------------------------------------------------------------------------

@dataclass
class Run:
    """One process: wall time [s], peak resident memory [kB], and its error if it failed."""
    wall_s: float
    peak_kb: int
    error: str = ""


# Starts a command and reports its wall time and peak memory. Linux carries a process's peak
# resident memory (ru_maxrss) over into the children it starts, so a command started by this
# script directly would show at least this script's own peak (the generated data frames); this
# small process starts it instead.
LAUNCH = """\
import json, os, shutil, sys, time
argv = sys.argv[2:]
t0 = time.perf_counter()
pid = os.posix_spawn(shutil.which(argv[0]) or argv[0], argv, os.environ)
_, status, usage = os.wait4(pid, 0)
wall = time.perf_counter() - t0
with open(sys.argv[1], "w") as f:
    json.dump({"wall_s": wall, "peak_kb": usage.ru_maxrss}, f)
sys.exit(os.waitstatus_to_exitcode(status))
"""


def run_process(argv: list[str]) -> Run:
    """Run ``argv`` in a fresh process (started by :data:`LAUNCH`); its wall time and its own
    peak memory."""
    with tempfile.TemporaryDirectory() as tmp:
        launch, result, err_path = (Path(tmp) / n for n in ("launch.py", "run.json", "err"))
        launch.write_text(LAUNCH)
        with open(err_path, "wb") as err:
            code = subprocess.call([sys.executable, "-I", str(launch), str(result), *argv],
                                   stdout=subprocess.DEVNULL, stderr=err)
        error = ""
        if code != 0 or not result.exists():
            lines = (err_path.read_text(errors="replace").strip().splitlines()
                     or ["(no output)"])
            error = f"exit {code}: {lines[-1]}"
        try:
            measured = json.loads(result.read_text())
        except (OSError, ValueError):  # not written, or cut short (a full disk)
            measured = {}
            error = error or "its timing was not written (is the disk full?)"
    return Run(measured.get("wall_s", float("nan")), measured.get("peak_kb", 0), error)


def reference_params(files: list[Path], db_file: Path) -> str:
    """The argument of a reference script (JSON): the files, a database, the site's design."""
    return json.dumps({
        "files": [str(f) for f in files], "db": str(db_file), "lat": SITE["latitude_deg"],
        "lon": SITE["longitude_deg"], "alt": SITE["altitude_m"], "tz": SITE["timezone"],
        "tilt": SITE["tilt_deg"], "azimuth": SITE["azimuth_deg"],
        "pdc0_w": SITE["dc_kwp"] * 1000, "pac0_w": SITE["ac_kw"] * 1000,
        "gamma_pdc": SITE["gamma_pct_per_c"] / 100, "interval_h": 1 / 60})


def expand(template: list[str], values: dict[str, str | list[str]]) -> list[str]:
    """The command line of ``template``: an argument that is exactly one placeholder of a list
    becomes several arguments; others are formatted."""
    argv: list[str] = []
    for arg in template:
        value = values.get(arg[1:-1]) if arg.startswith("{") and arg.endswith("}") else None
        argv.extend(value if isinstance(value, list) else [arg.format(**values)])
    return argv


def month_days(month: str) -> tuple[str, str]:
    """First and last day (included) of a ``YYYY-MM`` month."""
    first = pd.Period(month, "M")
    return f"{first.start_time:%Y-%m-%d}", f"{first.end_time:%Y-%m-%d}"


def median_run(runs: list[Run]) -> Run:
    """Median wall and median peak of repeated runs; an error if any run failed."""
    errors = [r.error for r in runs if r.error]
    if errors or not runs:
        return Run(float("nan"), 0, errors[0] if errors else "not run")
    return Run(statistics.median(r.wall_s for r in runs),
               int(statistics.median(r.peak_kb for r in runs)))


def total(runs: list[Run]) -> Run:
    """Several commands one after the other: sum of walls, max of peaks."""
    errors = [r.error for r in runs if r.error]
    return Run(sum(r.wall_s for r in runs), max((r.peak_kb for r in runs), default=0),
               errors[0] if errors else "")


def module_name(filename: str) -> str | None:
    """``perfcheck.x.y`` for a file of the perfcheck package (``__init__`` left out), else
    None."""
    parts = [p for p in Path(filename).with_suffix("").parts if p != "__init__"]
    if "perfcheck" not in parts:
        return None
    return ".".join(parts[len(parts) - 1 - parts[::-1].index("perfcheck"):])


IMPORTS_WHILE_RUNNING = "imports while running (inside the stages below)"


def stage_split(stats: pstats.Stats, min_share: float = 0.02) -> list[tuple[int, str, float]]:
    """Where a profiled command's time went, as (depth, name, seconds): the perfcheck functions
    its CLI module calls (depth 0, cumulative) and the perfcheck functions they call (depth 1),
    those above ``min_share`` of the whole, largest first; before them the start-up (recorded
    by :data:`PROFILED`) and the imports made while the command ran (part of the stages)."""
    entries = stats.stats  # (file, line, function) -> (calls, ncalls, tottime, cumtime, callers)
    callees: dict[tuple, list[tuple[tuple, float]]] = {}
    for func, (*_, callers) in entries.items():
        for caller, edge in callers.items():
            callees.setdefault(caller, []).append((func, edge[3]))

    def name(func: tuple) -> str | None:
        module = module_name(func[0])
        return f"{module}.{func[2]}" if module and not func[2].startswith("<") else None

    def is_cli(func: tuple) -> bool:
        return (name(func) or "").startswith("perfcheck.cli.")

    top: dict[tuple, float] = {}
    for caller, calls in callees.items():
        if is_cli(caller):
            for func, seconds in calls:
                if name(func) and not is_cli(func):
                    top[func] = top.get(func, 0.0) + seconds
    rows = [(0, f[2], v[3]) for f, v in entries.items() if f[0] == "<start-up>"]
    rows.append((0, IMPORTS_WHILE_RUNNING, sum(
        v[3] for f, v in entries.items() if f[2] == "_find_and_load")))
    limit = min_share * stats.total_tt
    for func, seconds in sorted(top.items(), key=lambda kv: -kv[1]):
        if seconds >= limit:
            rows.append((0, name(func), seconds))
            inner = sorted(((name(f), t) for f, t in callees.get(func, []) if name(f)),
                           key=lambda kv: -kv[1])
            rows.extend((1, n, t) for n, t in inner if t >= limit)
    return rows


# --- the table ------------------------------------------------------------------------------

@dataclass
class Row:
    what: str
    measured: str
    reference: str = "-"
    ratio: str = "-"
    target: str = "-"
    status: str = "-"


def verdict(value: float, limit: float) -> str:
    return "PASS" if value <= limit else "FAIL"


HEADER = Row("what", "measured", "reference", "ratio", "target", "")


def format_table(rows: list[Row], title: str = "", header: Row = HEADER) -> str:
    """A plain-text table under ``title``, columns as wide as their widest cell."""
    cells = [[r.what, r.measured, r.reference, r.ratio, r.target, r.status]
             for r in [header, *rows]]
    keep = [i for i in range(6) if i < 2 or any(c[i] for c in cells[1:])]  # drop empty ones
    cells = [[c[i] for i in keep] for c in cells]
    widths = [max(len(c[i]) for c in cells) for i in range(len(keep))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(row, widths, strict=True)).rstrip()
             for row in cells]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(([title] if title else []) + lines)


def secs(run: Run) -> str:
    return run.error or f"{run.wall_s:.2f} s"


def mem(run: Run) -> str:
    return run.error or f"{run.peak_kb / 1024:.0f} MB"


def ratio_row(what: str, run: Run, ref: Run, ref_label: str, limit: float) -> Row:
    """A wall-time row against a reference, target ``ratio <= limit``."""
    if run.error or ref.error:
        return Row(what, secs(run), f"{secs(ref)} {ref_label}", "-", f"<= {limit}x", "ERROR")
    ratio = run.wall_s / ref.wall_s
    return Row(what, secs(run), f"{secs(ref)} {ref_label}", f"{ratio:.2f}x", f"<= {limit}x",
               verdict(ratio, limit))


def limit_row(what: str, run: Run, limit: float, unit: str = "s",
              ref: Run | None = None, ref_label: str = "") -> Row:
    """A row against an absolute limit (seconds, or MB of peak memory)."""
    value = run.wall_s if unit == "s" else run.peak_kb / 1024
    shown = secs(run) if unit == "s" else mem(run)
    reference, ratio = "-", "-"
    if ref is not None:
        ref_value = ref.wall_s if unit == "s" else ref.peak_kb / 1024
        reference = f"{secs(ref) if unit == 's' else mem(ref)} {ref_label}"
        if not ref.error and not run.error:
            ratio = f"{value / ref_value:.2f}x"
    status = "ERROR" if run.error else verdict(value, limit)
    return Row(what, shown, reference, ratio, f"<= {limit:g} {unit}", status)


# --- the benchmark --------------------------------------------------------------------------

SECTIONS = {  # name: (references on one site-year, the last pipeline command it needs)
    "audit": (["notebook"], "check"),
    "ingest": (["read_csv"], "ingest"),
    "model": (["sun+perez"], "model"),
    "report": ([], "report"),
    "evidence": ([], "evidence"),
    "verify": (["verify reference"], "verify"),
    "memory": (["notebook"], "check"),
    "years": ([], "check"),
    "stages": ([], "check"),
    "version": ([], None),
    "demo": ([], None),
}


class Bench:
    """The measurements of one benchmark run, kept by key for the tables."""

    def __init__(self, root: Path, perfcheck: str, args: argparse.Namespace):
        self.root, self.perfcheck, self.args = root, perfcheck, args
        self.rows_per_unit = QUICK_MINUTES if args.quick else MINUTES_PER_YEAR
        self.month = QUICK_MONTH if args.quick else MONTH
        self.sections = [args.only] if args.only else list(SECTIONS)
        on_data = any(SECTIONS[s][1] for s in self.sections)
        self.sizes = args.years if "years" in self.sections else [1] if on_data else []
        self.runs: dict[tuple[int, str], list[Run]] = {}
        self.profiles: dict[str, tuple[float, list[tuple[int, str, float]]]] = {}
        for name, script in [*REFERENCES.items(), ("profiled", PROFILED)]:
            (root / f"{name.replace('+', '_')}.py").write_text(script)

    def record(self, size: int, key: str, run: Run) -> None:
        self.runs.setdefault((size, key), []).append(run)
        tag = f"{size} site-year{'s' if size > 1 else ''}" if size else "-"
        print(f"  {tag:<13} {key:<18} {secs(run):>10}  {mem(run):>8}", file=sys.stderr,
              flush=True)

    def get(self, size: int, key: str) -> Run:
        return median_run(self.runs.get((size, key), []))

    def command(self, name: str, values: dict) -> Run:
        return run_process([self.perfcheck, *expand(COMMANDS[name], values)])

    def reference(self, name: str, files: list[Path], db_file: Path) -> Run:
        script = self.root / f"{name.replace('+', '_')}.py"
        return run_process([sys.executable, str(script), reference_params(files, db_file)])

    def values(self, folder: Path, files: list[Path]) -> dict:
        first, last = month_days(self.month)
        return {"site": str(self.root / "data" / "site.toml"), "db": str(folder / "site.duckdb"),
                "data": [str(f) for f in files], "out": str(folder), "month": self.month,
                "first_day": first, "last_day": last}

    def pipeline_for(self, size: int) -> list[str]:
        needed = [SECTIONS[s][1] for s in self.sections if SECTIONS[s][1]]
        if size > 1:
            return AUDIT
        return PIPELINE[:max(PIPELINE.index(n) for n in needed) + 1] if needed else []

    def measure(self) -> None:
        t0 = time.perf_counter()
        files = write_data(self.root / "data", max(self.sizes, default=0), self.rows_per_unit)
        if files:
            mb = sum(f.stat().st_size for f in files) / 1e6
            print(f"data: {len(files)} file(s) of {self.rows_per_unit:,} 1-minute rows, "
                  f"{mb:.0f} MB, written in {time.perf_counter() - t0:.0f} s", file=sys.stderr,
                  flush=True)
        refs = {r for s in self.sections for r in SECTIONS[s][0]}
        for rep in range(self.args.repeats):
            print(f"repeat {rep + 1} of {self.args.repeats}", file=sys.stderr, flush=True)
            if "version" in self.sections:
                self.record(0, "version", self.command("version", {}))
            for size in self.sizes:
                self.measure_size(rep, size, files[:size], refs if size == 1 else set())
            if "demo" in self.sections:
                folder = self.root / f"r{rep}" / "demo"
                self.record(0, "demo", self.command("demo", {"out": str(folder)}))

    def measure_size(self, rep: int, size: int, files: list[Path], refs: set[str]) -> None:
        folder = self.root / f"r{rep}" / f"y{size}"
        folder.mkdir(parents=True)
        for name in REFERENCES:  # alternating with the commands, in the same repeat
            if name in refs:
                self.record(size, name, self.reference(name, files, folder / "raw.duckdb"))
        values = self.values(folder, files)
        for name in self.pipeline_for(size):
            self.record(size, name, self.command(name, values))
        if "stages" in self.sections and size == 1 and rep == 0:
            self.profile(files)
        if "verify reference" in refs:
            again = self.root / f"r{rep}" / "verify-reference"
            again.mkdir()
            for name in VERIFY_REFERENCE:
                self.record(size, f"ref {name}", self.command(name, self.values(again, files)))

    def profile(self, files: list[Path]) -> None:
        """One more pass of the commands, each under cProfile (not counted in the timings)."""
        folder = self.root / "profiled"
        folder.mkdir()
        values = self.values(folder, files)
        for name in self.pipeline_for(1):
            out = folder / f"{name}.prof"
            run = run_process([sys.executable, str(self.root / "profiled.py"), str(out),
                               *expand(COMMANDS[name], values)])
            self.record(1, f"{name} (profiled)", run)
            if not run.error:
                self.profiles[name] = (run.wall_s, stage_split(pstats.Stats(str(out))))

    def audit_total(self, size: int) -> Run:
        """The whole audit per repeat (sum of walls, max of peaks), median over repeats."""
        per_rep = zip(*(self.runs.get((size, c), []) for c in AUDIT), strict=False)
        return median_run([total(list(reps)) for reps in per_rep])

    def target_rows(self) -> list[Row]:
        rows, s = [], set(self.sections)
        unit = "1-minute site-year" if not self.args.quick else "quick data (31 days)"
        if "audit" in s:
            rows.append(ratio_row(f"whole audit ({' + '.join(AUDIT)}), {unit}",
                                  self.audit_total(1), self.get(1, "notebook"), "notebook", 1.0))
        if "ingest" in s:
            rows.append(ratio_row("ingest", self.get(1, "ingest"), self.get(1, "read_csv"),
                                  "DuckDB read_csv", 3.0))
        if "model" in s:
            rows.append(ratio_row("model", self.get(1, "model"), self.get(1, "sun+perez"),
                                  "pvlib sun + Perez", 0.5))
        for name in ("report", "evidence"):
            if name in s:
                rows.append(limit_row(f"{name} --month {self.month}", self.get(1, name), 3.0))
        if "verify" in s:
            ref = median_run([total(list(r)) for r in zip(
                *(self.runs.get((1, f"ref {c}"), []) for c in VERIFY_REFERENCE), strict=False)])
            rows.append(ratio_row("verify (bundle of one month)", self.get(1, "verify"), ref,
                                  f"re-run as commands: {' + '.join(VERIFY_REFERENCE)}", 1.5))
        if "memory" in s:  # the largest of any command on the site-year
            name, run = max(((n, self.get(1, n)) for n in self.pipeline_for(1)),
                            key=lambda nr: nr[1].peak_kb)
            rows.append(limit_row(f"peak memory, {unit} (largest: {name})", run, 600, "MB",
                                  self.get(1, "notebook"), "notebook"))
        if "years" in s and len(self.sizes) > 1:
            n = max(self.sizes)
            one, big = self.audit_total(1), self.audit_total(n)
            for label, unit, per_row in (
                    ("time", "us", lambda r, k: r.wall_s / (k * self.rows_per_unit) * 1e6),
                    ("memory", "B", lambda r, k: r.peak_kb * 1024 / (k * self.rows_per_unit))):
                what = f"{label} per row, {n} site-years against 1"
                if one.error or big.error:
                    rows.append(Row(what, secs(big), secs(one), "-", "flat or falling", "ERROR"))
                    continue
                ratio = per_row(big, n) / per_row(one, 1)
                rows.append(Row(what, f"{per_row(big, n):.2f} {unit}",
                                f"{per_row(one, 1):.2f} {unit} at 1", f"{ratio:.2f}x",
                                f"<= {SCALING_ALLOWANCE}x", verdict(ratio, SCALING_ALLOWANCE)))
        if "version" in s:
            rows.append(limit_row("perfcheck --version", self.get(0, "version"), 0.3))
        if "demo" in s:
            demo = self.get(0, "demo")
            rows.append(Row("demo --quiet (compare before/after a change)", secs(demo),
                            status="ERROR" if demo.error else "-"))
        return rows

    def years_rows(self) -> list[Row]:
        rows = []
        for n in self.sizes:
            run, rows_n = self.audit_total(n), n * self.rows_per_unit
            per_row = ("-" if run.error else
                       f"{run.wall_s / rows_n * 1e6:.2f} us, {run.peak_kb * 1024 / rows_n:.0f} B")
            rows.append(Row(f"{n} site-year{'s' if n > 1 else ''} ({rows_n:,} rows)",
                            f"{secs(run)}, {mem(run)}", per_row, "", "", ""))
        return rows

    def stage_rows(self) -> list[Row]:
        rows = []
        for command, (wall, split) in self.profiles.items():
            rows.append(Row(command, f"{wall:.2f} s", "100 %", "", "", ""))
            rest = wall - sum(t for d, n, t in split if d == 0 and n != IMPORTS_WHILE_RUNNING)
            # the rest: the CLI's own calls (opening the database, writing the output) and the
            # imports they make, stages under min_share, interpreter start and exit
            split = [*split, (0, "the rest: the CLI's own calls, smaller stages, start, exit",
                              rest)]
            rows.extend(Row(f"{'  ' * (depth + 1)}{name}", f"{seconds:.2f} s",
                            f"{100 * seconds / wall:.0f} %", "", "", "")
                        for depth, name, seconds in split)
        return rows

    def split_rows(self) -> list[Row]:
        rows = []
        for (size, key), runs in self.runs.items():
            run = median_run(runs)
            where = f"{size} site-year{'s' if size > 1 else ''}" if size else ""
            rows.append(Row(f"{key} {where}".strip(), secs(run), mem(run), "", "", ""))
        return rows

    def report(self) -> str:
        targets = self.target_rows()
        parts = [format_table(targets, f"Targets of issue 13 (median of {self.args.repeats}; "
                              "whole commands in fresh processes)")] if targets else []
        if "years" in self.sections:
            parts.append(format_table(self.years_rows(), "Whole audit by size",
                                      Row("data", "wall, peak", "per row", "", "", "")))
        if self.profiles:
            parts.append(format_table(
                self.stage_rows(), "Where the time goes (one more run of each command, under "
                "cProfile after its start-up; the profiler slows Python code; not in the medians)",
                Row("command, stage", "wall", "share", "", "", "")))
        parts.append(format_table(self.split_rows(), "Per command and reference (median)",
                                  Row("process", "wall", "peak", "", "", "")))
        return "\n\n".join(parts)


def find_perfcheck() -> str:
    """The ``perfcheck`` entry point beside this Python, else the first on PATH."""
    beside = Path(sys.executable).parent / "perfcheck"
    found = str(beside) if beside.exists() else shutil.which("perfcheck")
    if not found:
        sys.exit("perfcheck is not installed: pip install '.[test]' into this Python first")
    return found


def parse_args(argv: list[str] | None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", choices=list(SECTIONS), help="one figure (and what it needs)")
    parser.add_argument("--repeats", type=int, default=3, help="median of N runs (default 3)")
    parser.add_argument("--years", default="1,2,4", type=lambda v: sorted(
        {int(x) for x in v.split(",")} | {1}), help="site-years of the size table (1,2,4)")
    parser.add_argument("--quick", action="store_true",
                        help="31 days per site-year instead of 525,600 minutes (smoke run)")
    args = parser.parse_args(argv)
    if args.repeats < 1:
        parser.error("--repeats must be at least 1")
    return args


def main(argv: list[str] | None = None) -> int:
    args = parse_args(argv)
    perfcheck = find_perfcheck()
    version = subprocess.run([perfcheck, "--version"], capture_output=True, text=True)
    print(f"{perfcheck} ({version.stdout.strip()}), {os.cpu_count()} cores", flush=True)
    with tempfile.TemporaryDirectory(prefix="perfcheck-bench-") as tmp:
        bench = Bench(Path(tmp), perfcheck, args)
        bench.measure()
        print(bench.report(), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
