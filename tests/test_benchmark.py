"""The benchmark script's pure helpers and reference scripts, so that it does not rot.

No timing is checked here (speed targets live only in ``tests/benchmark.py``).
"""

from __future__ import annotations

import sys
from types import SimpleNamespace

import benchmark
import numpy as np
import pandas as pd
import pytest
from benchmark import (
    COLUMNS,
    COMMANDS,
    IMPORTS_WHILE_RUNNING,
    REFERENCES,
    SITE,
    START,
    Row,
    Run,
    expand,
    format_table,
    median_run,
    module_name,
    month_days,
    parse_args,
    reference_params,
    run_process,
    site_toml,
    site_year,
    stage_split,
    total,
    write_data,
)

from perfcheck.cli import main
from perfcheck.site import load_site


def test_site_year_rows_are_plausible():
    # invented truth: one June day at 47.5 N, 8.7 E; solar noon near 11:25 UTC (12 h minus
    # 8.7/15 h, no equation of time in the generator), night at midnight UTC
    day = site_year(pd.Timestamp("2025-06-21"), 1440, seed=1)
    assert list(day.columns) == ["Timestamp"] + [c[0] for c in COLUMNS]
    assert day["Timestamp"].iloc[0] == "2025-06-21 00:00:00"
    assert day.loc[0, "POA"] == day.loc[0, "GHI"] == day.loc[0, "P_AC"] == 0
    noon = 11 * 60 + 25
    assert day.loc[noon, "POA"] > 0 and day.loc[noon, "GHI"] > 0
    # Haurwitz (1945) clear-sky GHI is below 1098 W/m2; the generator adds +-3 % noise
    assert day["GHI"].max() <= 1098 * 1.03
    assert (day["P_AC"] >= 0).all() and day["P_AC"].max() <= SITE["ac_kw"]
    assert (day["T_MOD"] >= day["T_AMB"]).all()


def test_site_year_is_reproducible_and_seeded():
    a, b = (site_year(START, 120, seed=3) for _ in range(2))
    pd.testing.assert_frame_equal(a, b)
    assert not np.array_equal(site_year(START, 120, seed=4)["WIND"], a["WIND"])


def test_site_file_and_data_are_valid_for_perfcheck(tmp_path):
    files = write_data(tmp_path, units=2, rows=60)
    assert [f.name for f in files] == ["minute_1_2025-01-01.csv", "minute_2_2025-01-01.csv"]
    assert pd.read_csv(files[1])["Timestamp"].iloc[0] == "2025-01-01 01:00:00"  # continues
    site = load_site(tmp_path / "site.toml")
    assert [inv.id for inv in site.inverters] == ["INV1"]
    assert site_toml() == (tmp_path / "site.toml").read_text()


def test_every_command_line_names_a_perfcheck_command():
    for name, argv in COMMANDS.items():
        if not argv[0].startswith("-"):
            assert argv[0] in main.list_commands(None), \
                f"COMMANDS[{name!r}]: no command {argv[0]!r}"


def test_expand_splices_a_list_placeholder_and_formats_the_rest():
    argv = expand(COMMANDS["ingest"], {"site": "s.toml", "data": ["a.csv", "b.csv"],
                                       "db": "x.duckdb"})
    assert argv == ["ingest", "s.toml", "a.csv", "b.csv", "--db", "x.duckdb"]
    assert expand(["--out", "{out}/r"], {"out": "/t"}) == ["--out", "/t/r"]


def test_month_days_include_the_last_day():
    assert month_days("2025-02") == ("2025-02-01", "2025-02-28")
    assert month_days("2028-02") == ("2028-02-01", "2028-02-29")  # leap year


def test_median_and_total_of_runs():
    runs = [Run(3.0, 300), Run(1.0, 100), Run(2.0, 500)]
    assert median_run(runs) == Run(2.0, 300)
    assert total(runs) == Run(6.0, 500)
    assert median_run([Run(1.0, 1), Run(2.0, 2, "exit 2: bad")]).error == "exit 2: bad"
    assert median_run([]).error == "not run"


def test_format_table_aligns_columns_and_drops_empty_ones():
    text = format_table([Row("ingest", "1.00 s", "0.50 s", "2.00x", "<= 3.0x", "PASS"),
                         Row("a longer name", "12.00 s", "", "", "", "")], "Title")
    lines = text.splitlines()
    assert lines[0] == "Title"
    assert lines[1].split() == ["what", "measured", "reference", "ratio", "target"]
    assert lines[3].index("1.00 s") == lines[4].index("12.00 s") == lines[1].index("measured")
    assert lines[3].endswith("PASS")
    assert "target" not in format_table([Row("x", "1", "", "", "", "")])


def test_parse_args_always_measures_one_site_year():
    args = parse_args(["--years", "4,2", "--quick", "--repeats", "1"])
    assert args.years == [1, 2, 4] and args.quick and args.repeats == 1


def test_run_process_reports_the_error_line():
    ok = run_process([sys.executable, "-c", "pass"])
    assert ok.error == "" and ok.wall_s > 0 and ok.peak_kb > 0
    bad = run_process([sys.executable, "-c", "import sys; sys.exit('no such file')"])
    assert bad.error == "exit 1: no such file"


def test_run_process_reports_a_timing_cut_short(monkeypatch):
    # a full disk leaves the launcher's result file empty: an error line, not a traceback
    monkeypatch.setattr(benchmark, "LAUNCH", "import sys; open(sys.argv[1], 'w').close()")
    run = run_process([sys.executable, "-c", "pass"])
    assert run.error == "its timing was not written (is the disk full?)"


def test_run_process_peak_is_the_command_s_own():
    # Linux carries a process's ru_maxrss over into the children it starts (getrusage(2)):
    # the command must not show this process's 300 MB (invented truth: a Python that
    # allocates nothing stays far below it).
    held = bytearray(300 * 1024 * 1024)
    held[::4096] = b"x" * len(held[::4096])  # touched, so resident
    run = run_process([sys.executable, "-c", "pass"])
    assert run.error == "" and run.peak_kb < 100 * 1024


@pytest.mark.parametrize("name", sorted(REFERENCES))
def test_reference_scripts_run_on_a_day(tmp_path, name):
    files = write_data(tmp_path, units=1, rows=1440)
    script = tmp_path / "ref.py"
    script.write_text(REFERENCES[name])
    params = reference_params(files, tmp_path / "raw.duckdb")
    assert run_process([sys.executable, str(script), params]).error == ""


def test_module_name_of_package_files():
    assert module_name("/v/site-packages/perfcheck/detect/__init__.py") == "perfcheck.detect"
    assert module_name("/v/site-packages/perfcheck/cli/ingest.py") == "perfcheck.cli.ingest"
    assert module_name("/usr/lib/python3.11/json/__init__.py") is None


def test_stage_split_of_an_invented_profile():
    # invented truth: the CLI calls ingest_files (4 s), which calls _one (3 s) and a tiny
    # helper (0.01 s, below the 2 % shown); 2 s start-up, 0.5 s of imports while running
    cli, files = ("/p/perfcheck/cli/ingest.py", 1, "ingest"), ("/p/perfcheck/ingest.py", 2,
                                                                "ingest_files")
    one, tiny = ("/p/perfcheck/ingest.py", 3, "_one"), ("/p/perfcheck/ingest.py", 4, "_tiny")
    stats = SimpleNamespace(total_tt=7.0, stats={
        cli: (1, 1, 0.1, 5.0, {}),
        files: (1, 1, 1.0, 4.0, {cli: (1, 1, 1.0, 4.0)}),
        one: (1, 1, 3.0, 3.0, {files: (1, 1, 3.0, 3.0)}),
        tiny: (1, 1, 0.01, 0.01, {files: (1, 1, 0.01, 0.01)}),
        ("<start-up>", 0, "start-up"): (1, 1, 2.0, 2.0, {}),
        ("<frozen importlib._bootstrap>", 1, "_find_and_load"): (3, 3, 0.1, 0.5,
                                                                 {one: (3, 3, 0.1, 0.5)}),
    })
    assert stage_split(stats) == [(0, "start-up", 2.0), (0, IMPORTS_WHILE_RUNNING, 0.5),
                                  (0, "perfcheck.ingest.ingest_files", 4.0),
                                  (1, "perfcheck.ingest._one", 3.0)]
