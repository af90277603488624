"""The monthly job: exit codes, silence when healthy, the lock, re-runs, history and trend.

The analysis stages are replaced by invented check results (the job's mechanics are under test).
"""

from __future__ import annotations

import hashlib
import json
import re

import pytest
from click.testing import CliRunner
from report_fixtures import checked, example_aligned, example_check, write_site

from perfcheck import align, db, monthly, pipeline
from perfcheck.cli import main

OUTAGE = {"kind": "outage", "scope": "inverter:INV1", "start": "2025-06-10T09:00:00+02:00",
          "end": "2025-06-10T15:00:00+02:00", "energy_loss_kwh": 180.0,
          "energy_loss_kwh_low": 170.0, "energy_loss_kwh_high": 190.0,
          "method": "zero output with irradiance and producing siblings", "evidence": {}}


@pytest.fixture()
def job(tmp_path, monkeypatch):
    """A site with an inbox; the stages record what they were given."""
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    (inbox / "box_2025-06.csv").write_text("time,p1\n2025-06-01T12:00:00+02:00,1000\n")
    (inbox / "notes.csv").write_text("not a logger file")  # no logger reads it: left alone
    state = {"ingested": [], "epi": 0.98, "events": []}

    def update(con, site, paths, quiet=True):
        for p in paths:
            state["ingested"].append(p.name)
            digest = hashlib.sha256(p.read_bytes()).hexdigest()
            con.execute("INSERT INTO source_files (file_id, path, logger, sha256, size_bytes, "
                        "rows_read, rows_loaded, rows_duplicate, rows_quarantined, conflicts, "
                        "ingested_at, tool_version) VALUES (nextval('source_file_id'), ?, 'box', "
                        "?, 1, 1, 1, 0, 0, 0, now(), '0.1.0')", [str(p), digest])
        return []

    def view(con, site, start, end):
        r = example_check(start.tz_convert(site.timezone).isoformat(),
                          end.tz_convert(site.timezone).isoformat())
        month = start.tz_convert(site.timezone).strftime("%Y-%m")
        r["metrics"]["monthly"][0]["month"] = month
        r["metrics"]["period"]["epi"] = state["epi"]
        if state.get("no_data"):
            r["metrics"]["period"].update(valid_intervals=0, epi=None, measured_kwh=0.0)
        r["events"] += state["events"]
        return checked(site, r)

    monkeypatch.setattr(pipeline, "update", update)
    monkeypatch.setattr(pipeline, "view", view)
    monkeypatch.setattr(align, "load_aligned", lambda *a, **k: example_aligned())
    return tmp_path, state


def run(tmp_path, *args):
    return CliRunner().invoke(main, ["monthly", str(tmp_path / "site.toml"), *args])


def history(tmp_path):
    con = db.connect(tmp_path / "site.duckdb")
    try:
        return con.execute("SELECT month, epi, status, exit_code FROM history ORDER BY month")\
            .fetchall()
    finally:
        con.close()


def test_healthy_is_silent_and_writes_outputs(job):
    tmp, state = job
    write_site(tmp, "[report]\nunderperformance_threshold_pct = 5\n")
    r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 0 and r.output == ""
    out = tmp / "reports" / "2025-06"
    for name in ("report.html", "report.pdf", "check.json", "events.csv", "monthly.csv"):
        assert (out / name).is_file(), name
    assert state["ingested"] == ["box_2025-06.csv"]
    assert history(tmp) == [("2025-06", 0.98, "healthy", 0)]
    log = (tmp / "reports" / "perfcheck-monthly.log").read_text()
    assert "1 new file(s) in the inbox" in log and "finished with exit code 0" in log
    assert "notes.csv: no [[loggers]] entry matches this file name; left in the inbox" in log


def test_rerun_same_month_same_outputs_one_history_row(job):
    tmp, state = job
    write_site(tmp, "")
    assert run(tmp, "--month", "2025-06").exit_code == 0
    first = json.loads((tmp / "reports" / "2025-06" / "check.json").read_text())
    r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 0
    again = json.loads((tmp / "reports" / "2025-06" / "check.json").read_text())
    assert again == first
    assert state["ingested"] == ["box_2025-06.csv"]  # the second run found nothing new
    assert history(tmp) == [("2025-06", 0.98, "healthy", 0)]
    assert not list((tmp / "reports").glob(".*partial"))


def test_underperformance_exit_1_with_summary(job):
    tmp, state = job
    write_site(tmp, "")
    state["epi"] = 0.944  # below 1 - 5/100 = 0.95, the default threshold
    r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 1 and r.stdout == ""
    assert r.stderr.startswith("perfcheck monthly: Hollowmere test array, 2025-06: "
                               "UNDERPERFORMANCE. EPI 0.944 (0.934–0.954) is below 0.950 "
                               "(report.underperformance_threshold_pct = 5).")
    assert "Top events: partial outage on inverter INV2 412 kWh" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1  # one paragraph


def test_month_without_data_exit_1_and_no_history_row(job):
    tmp, state = job
    write_site(tmp, "")
    state["no_data"] = True
    r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 1
    assert r.stderr.startswith("perfcheck monthly: Hollowmere test array, 2025-06: NO DATA. "
                               "no data for the month. No data for June 2025: no feed has "
                               "reported yet.")
    assert history(tmp) == []
    assert (tmp / "reports" / "2025-06" / "report.html").is_file()  # the report says so


def test_critical_event_exit_3(job):
    tmp, state = job
    write_site(tmp, "")
    state["events"] = [OUTAGE]
    r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 3
    assert "CRITICAL. 1 critical event(s) (outage), first: outage on inverter INV1" in r.stderr


def test_trend_against_previous_months(job):
    tmp, state = job
    write_site(tmp, "")
    assert run(tmp, "--month", "2025-05").exit_code == 0
    state["epi"] = 0.96
    r = run(tmp, "--month", "2025-06", "--verbose")
    assert r.exit_code == 0
    # 0.96 against the one earlier month's 0.98: down 0.020
    assert "Trend: EPI down 0.020 against the mean of the previous 1 month(s) (0.980)" in r.stderr
    assert [row[0] for row in history(tmp)] == ["2025-05", "2025-06"]


def test_config_errors_exit_2(job):
    tmp, _ = job
    write_site(tmp, "[report]\nunderperformance_threshold_pct = \"five\"\n")
    r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 2
    assert r.stderr.strip() == (f"perfcheck: error: {tmp / 'site.toml'}: "
                                "report.underperformance_threshold_pct: expected a number, "
                                "got str 'five'")


def test_missing_inbox_exit_2(job):
    tmp, _ = job
    (tmp / "site.toml").write_text("")
    write_site(tmp, "")
    text = (tmp / "site.toml").read_text().replace('inbox = "inbox/*.csv"\n', "")
    (tmp / "site.toml").write_text(text)
    r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 2
    assert "site.inbox: not set; the monthly job needs the glob" in r.stderr


def test_lock_second_run_waits_then_gives_up(job):
    tmp, _ = job
    write_site(tmp, "[report]\nlock_wait_s = 0.5\n")
    with monthly.lock(tmp / "site.monthly.lock", 0):
        r = run(tmp, "--month", "2025-06")
    assert r.exit_code == 4
    assert r.stderr.startswith(f"perfcheck: error: {tmp / 'site.monthly.lock'}: another "
                               "perfcheck monthly run holds the lock (pid ")
    assert r.stderr.strip().endswith("gave up after 0.5 s")
    assert run(tmp, "--month", "2025-06").exit_code == 0  # free again once released


@pytest.mark.slow
def test_demo_months_through_the_real_stages(tmp_path):
    """The job on two, then three months of the invented demo plant, stages not replaced."""
    import shutil

    from perfcheck import evidence
    from perfcheck.scenario import demo_dir

    src = demo_dir()
    text = re.sub(r"(?m)^#?\s*inbox\s*=.*$", "", (src / "site.toml").read_text("utf-8"))
    (tmp_path / "site.toml").write_text(text.replace("[site]\n", "[site]\ninbox = "
                                                     "\"incoming/*.csv\"\n", 1))
    inbox = tmp_path / "incoming"
    inbox.mkdir()
    for p in sorted(src.glob("*_2024-0[56].csv")):
        shutil.copy(p, inbox / p.name)
    first = run(tmp_path, "--month", "2024-06")
    assert first.exit_code in (0, 1, 3), first.output
    assert (first.stderr == "") == (first.exit_code == 0)
    out = tmp_path / "reports" / "2024-06"
    doc = json.loads((out / "check.json").read_text())
    again = run(tmp_path, "--month", "2024-06")
    assert again.exit_code == first.exit_code
    redo = json.loads((out / "check.json").read_text())
    assert evidence.json_differences(evidence.strip_volatile(doc),
                                     evidence.strip_volatile(redo)) == []
    log = (tmp_path / "reports" / "perfcheck-monthly.log").read_text()
    assert "4 new file(s) in the inbox" in log and "0 new file(s) in the inbox" in log
    for p in sorted(src.glob("*_2024-07.csv")):
        shutil.copy(p, inbox / p.name)
    assert run(tmp_path, "--month", "2024-07").exit_code in (0, 1, 3)
    assert [row[0] for row in history(tmp_path)] == ["2024-06", "2024-07"]
    # August has no files: exit 1, the feeds that stopped named, no history row
    gone = run(tmp_path, "--month", "2024-08")
    assert gone.exit_code == 1
    assert "NO DATA" in gone.stderr and "No data for August 2024: no feed reported: AC power " \
        "of inverter inv1" in gone.stderr and "(last reading: 2024-07-31 23:5" in gone.stderr
    assert [row[0] for row in history(tmp_path)] == ["2024-06", "2024-07"]


def _hold_database(path: str, ready: str, release: str) -> None:
    import pathlib
    import time

    import duckdb

    con = duckdb.connect(path)  # DuckDB's file lock: no other process may open it
    pathlib.Path(ready).touch()
    while not pathlib.Path(release).exists():
        time.sleep(0.05)
    con.close()


def test_database_held_by_another_process_waits_then_exit_4(job):
    # fuzz finding of issue 10: this exited 2 at once ("cannot open database")
    import multiprocessing as mp
    import time

    tmp, _ = job
    write_site(tmp, "[report]\nlock_wait_s = 0.5\n")
    db.connect(tmp / "site.duckdb").close()
    ready, release = tmp / "ready", tmp / "release"
    child = mp.get_context("spawn").Process(
        target=_hold_database, args=(str(tmp / "site.duckdb"), str(ready), str(release)))
    child.start()
    try:
        deadline = time.monotonic() + 60
        while not ready.exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        r = run(tmp, "--month", "2025-06")
    finally:
        release.touch()
        child.join()
    assert r.exit_code == 4, r.output
    assert r.stderr == (f"perfcheck: error: {tmp / 'site.duckdb'}: another process holds the "
                        "database; gave up after 0.5 s\n")
    assert run(tmp, "--month", "2025-06").exit_code == 0  # free again once released


def test_unreadable_inbox_files_are_logged_and_skipped(job):
    # issue 10: one half-written or foreign file in the inbox blocked every month
    tmp, state = job
    write_site(tmp, "")
    (tmp / "inbox" / "box_2025-05.csv").write_bytes(b"")  # empty: a copy still starting
    (tmp / "inbox" / "box_other.csv").write_text("x;y\n1;2\n")  # no 'time' column
    r = run(tmp, "--month", "2025-06", "--verbose")
    assert r.exit_code == 0, r.output
    assert state["ingested"] == ["box_2025-06.csv"]
    log = (tmp / "reports" / "perfcheck-monthly.log").read_text()
    assert f"{tmp / 'inbox' / 'box_2025-05.csv'}: empty file (0 bytes, no lines); skipped, " \
           "left in the inbox" in log
    assert f"{tmp / 'inbox' / 'box_other.csv'}: line 1: no column 'time'" in log
    assert "notes.csv: no [[loggers]] entry matches this file name; left in the inbox" in log
    assert "1 new file(s) ingested, 2 skipped (unreadable, see the log)" in r.output
