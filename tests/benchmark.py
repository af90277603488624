"""Speed benchmarks (not collected by pytest). Run: ``python tests/benchmark.py [--only NAME]``.

The ingest section writes a 1-minute site-year (525,600 rows, 9 value columns) into a temporary
folder and prints the ingest time, rows per second, peak memory and the ratio to a bare DuckDB
``read_csv`` of the same file into a table, measured in the same run. Targets: ratio <= 2.0,
peak memory <= 1 GB. Each step runs in a child process so that its peak memory (max RSS) is its
own; each is run three times and the fastest run counts (the machine may be shared). Other
modules ``tests/bench_*.py`` add sections through a ``bench(print_row)`` function.
"""

from __future__ import annotations

import argparse
import importlib.util
import multiprocessing as mp
import resource
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
MINUTES_PER_YEAR = 525_600
REPEATS = 3

SITE_TOML = """
[site]
name = "Benchmark field"
latitude_deg = 47.5
longitude_deg = 8.7
timezone = "Europe/Zurich"
commissioned = 2024-01-01

{inverters}

[[loggers]]
name = "minute"
match = "*.csv"
interval_min = 1
sentinels = ["-9999"]
[loggers.time]
columns = ["Timestamp"]
kind = "utc"
format = "%Y-%m-%d %H:%M:%S"
{columns}
"""

INVERTER = """
[[inverters]]
id = "INV{i}"
ac_kw = 50
[[inverters.arrays]]
dc_kwp = 60
tilt_deg = {tilt}
azimuth_deg = {az}
gamma_pct_per_c = -0.37
strings = 10
"""

COLUMNS = [  # (header, quantity, unit, inverter)
    ("P_INV1", "ac_power", "kW", "INV1"),
    ("P_INV2", "ac_power", "kW", "INV2"),
    ("P_INV3", "ac_power", "kW", "INV3"),
    ("E_PLANT", "energy_register", "kWh", "plant"),
    ("POA", "poa", "W/m2", None),
    ("GHI", "ghi", "W/m2", None),
    ("T_AMB", "temp_air", "C", None),
    ("T_MOD", "temp_module", "C", None),
    ("WIND", "wind_speed", "m/s", None),
]


def write_site_year(folder: Path) -> tuple[Path, Path]:
    """A site file and a 1-minute year of logger data (random but plausible values)."""
    rng = np.random.default_rng(2024)
    ts = pd.date_range("2024-01-01", periods=MINUTES_PER_YEAR, freq="min")
    frame = pd.DataFrame({"Timestamp": ts.strftime("%Y-%m-%d %H:%M:%S")})
    day = np.clip(np.sin(np.pi * ((ts.hour + ts.minute / 60 - 6) / 12)), 0, None)
    for name, quantity, _, _ in COLUMNS:
        if quantity == "ac_power":
            frame[name] = np.round(45 * day * rng.uniform(0.8, 1.0, len(ts)), 3)
        elif quantity == "energy_register":
            frame[name] = np.round(np.cumsum(135 * day / 60), 3)
        elif quantity in ("poa", "ghi"):
            frame[name] = np.round(1000 * day * rng.uniform(0.5, 1.0, len(ts)), 1)
        else:
            frame[name] = np.round(rng.uniform(0, 40, len(ts)), 2)
    csv = folder / "minute_2024.csv"
    frame.to_csv(csv, index=False)
    cols = []
    for name, quantity, unit, inverter in COLUMNS:
        cols.append(f'[[loggers.columns]]\nname = "{name}"\nquantity = "{quantity}"\n'
                    f'unit = "{unit}"' + (f'\ninverter = "{inverter}"' if inverter else ""))
    site = folder / "site.toml"
    inverters = "\n".join(INVERTER.format(i=i, tilt=25, az=180) for i in (1, 2, 3))
    site.write_text(SITE_TOML.format(inverters=inverters, columns="\n".join(cols)))
    return site, csv


def _bare(csv: str, db_path: str, out: mp.Queue) -> None:
    import duckdb

    con = duckdb.connect(db_path)
    t0 = time.perf_counter()
    con.execute("CREATE TABLE bare AS SELECT * FROM read_csv(?)", [csv])
    con.execute("CHECKPOINT")
    out.put((time.perf_counter() - t0, peak_kb()))


def _ingest(site_path: str, csv: str, db_path: str, out: mp.Queue) -> None:
    from perfcheck import db
    from perfcheck.ingest import ingest_files
    from perfcheck.site import load_site

    site = load_site(site_path)
    con = db.connect(db_path)
    t0 = time.perf_counter()
    (res,) = ingest_files(con, site, [csv])
    con.execute("CHECKPOINT")
    elapsed = time.perf_counter() - t0
    assert res.rows_read == res.rows_loaded == MINUTES_PER_YEAR, res
    out.put((elapsed, peak_kb()))


def peak_kb() -> int:
    """This process's own peak resident memory [kB].

    ``VmHWM`` belongs to the process's address space, which a spawned child gets new;
    ``ru_maxrss`` would carry over the parent's peak through fork and exec.
    """
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def in_child(target: Callable, *args: str) -> tuple:
    """Run ``target(*args, queue)`` in a fresh process; return what it put on the queue (a
    measurement and that process's own peak memory)."""
    ctx = mp.get_context("spawn")
    out = ctx.Queue()
    proc = ctx.Process(target=target, args=(*args, out))
    proc.start()
    result = out.get()
    proc.join()
    return result


def bench_ingest(print_row: Callable[[str, str], None]) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        site, csv = write_site_year(folder)
        size_mb = csv.stat().st_size / 1e6
        print_row("ingest: file", f"{MINUTES_PER_YEAR} rows x {len(COLUMNS)} values, "
                  f"{size_mb:.1f} MB")
        # best of REPEATS, alternating, each in a fresh child and a fresh database: the
        # machine is shared, and the minimum is the least disturbed run of each
        bare, ours = [], []
        for i in range(REPEATS):
            bare.append(in_child(_bare, str(csv), str(folder / f"bare{i}.duckdb")))
            ours.append(in_child(_ingest, str(site), str(csv), str(folder / f"site{i}.duckdb")))
        bare_s, bare_kb = min(t for t, _ in bare), max(m for _, m in bare)
        ingest_s, ingest_kb = min(t for t, _ in ours), max(m for _, m in ours)
        print_row("ingest: bare read_csv", f"{bare_s:.2f} s, peak {bare_kb / 1024:.0f} MB "
                  f"(best of {REPEATS})")
        print_row("ingest: perfcheck ingest",
                  f"{ingest_s:.2f} s, {MINUTES_PER_YEAR / ingest_s:,.0f} rows/s, "
                  f"{MINUTES_PER_YEAR * len(COLUMNS) / ingest_s:,.0f} values/s, "
                  f"peak {ingest_kb / 1024:.0f} MB (target <= 1024 MB)")
        print_row("ingest: ratio to bare read_csv", f"{ingest_s / bare_s:.2f} (target <= 2.0)")


def _sections() -> dict[str, Callable]:
    sections: dict[str, Callable] = {"ingest": bench_ingest}
    for path in sorted(HERE.glob("bench_*.py")):
        spec = importlib.util.spec_from_file_location(path.stem, path)
        module = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(module)
        sections[path.stem.removeprefix("bench_")] = module.bench
    return sections


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--only", metavar="NAME", help="run one section (ingest, or a "
                        "tests/bench_NAME.py module)")
    args = parser.parse_args(argv)
    sections = _sections()
    if args.only and args.only not in sections:
        parser.error(f"no section {args.only!r}; sections: {', '.join(sections)}")

    def print_row(label: str, value: str) -> None:
        print(f"{label:<40} {value}", flush=True)

    for name, fn in sections.items():
        if args.only in (None, name):
            fn(print_row)
    return 0


if __name__ == "__main__":
    sys.exit(main())
