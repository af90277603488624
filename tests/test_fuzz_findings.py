"""Reproducers of the fuzz findings of issue 10 (ingest, quality, model, output writing), one
test each; those of the site file, verify and the monthly lock live in test_site.py,
test_evidence.py and test_monthly.py.

Every input here is an invented logger file; the truth each test states is the behaviour the
issue asks for: a bad line is quarantined with its reason and the rest loaded, nothing
non-finite or out of range is stored, the later stages run, and a failed write leaves nothing
partial.
"""

from __future__ import annotations

import errno
import os
import tempfile
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st
from logger_files import run_ingest, write_case
from model_fixtures import clear_days, make_site, open_db, store

from perfcheck import atomic, db, model, quality, report
from perfcheck.cli import main
from perfcheck.errors import OutputError
from perfcheck.ingest import ingest_files
from perfcheck.site import load_site


def _ingest(tmp_path, body, **kw):
    site_path, log = write_case(tmp_path, body, **kw)
    site = load_site(site_path)
    con = db.connect(tmp_path / "site.duckdb")
    (res,) = ingest_files(con, site, [log])
    return con, site, res


def _quarantine(con):
    return con.execute("SELECT line, reason FROM quarantine ORDER BY line").fetchall()


def test_timestamps_outside_1678_to_2261_are_quarantined(tmp_path):
    # a two-digit year read with %Y (year 24) and a clock far in the future: both outside what
    # pandas' nanosecond timestamps hold (1677-09-21 to 2262-04-11, pandas documentation)
    body = ("ts,P,G\n24-06-01 10:00,1,100\n2024-06-01 10:05,1,100\n"
            "2300-01-01 00:00,1,100\n")
    con, site, res = _ingest(tmp_path, body)
    assert (res.rows_read, res.rows_loaded, res.rows_quarantined) == (3, 1, 2)
    reasons = _quarantine(con)
    assert reasons[0] == (2, "time '24-06-01 10:00' is outside the years 1678 to 2261 (a "
                             "two-digit year read as four digits, or a logger clock reset?)")
    assert reasons[1][0] == 4 and "outside the years 1678 to 2261" in reasons[1][1]
    # nothing out of range is stored, not even as a quarantine instant, so pandas can read all
    assert con.execute("SELECT count(*) FROM quarantine "
                       "WHERE year(ts) NOT BETWEEN 1678 AND 2261").fetchone() == (0,)
    pd.DatetimeIndex(con.execute("SELECT ts FROM readings").df()["ts"])
    quality.run(con, site)  # crashed before (OutOfBoundsDatetime)


def test_epoch_out_of_range_is_quarantined(tmp_path):
    # 9e9 s since 1970 is in the year 2255, 1e10 s in 2286 (seconds / 31,556,952 s per year)
    con, _, res = _ingest(tmp_path, "ts,P,G\n9000000000,1,2\n10000000000,1,2\n",
                          time_kind="epoch")
    assert (res.rows_loaded, res.rows_quarantined) == (1, 1)
    assert "outside the years 1678 to 2261" in _quarantine(con)[0][1]


def test_non_finite_values_are_quarantined_nan_is_missing(tmp_path):
    body = ("ts,P,G\n"
            "2024-06-01 10:00,inf,100\n"          # 2 quarantined
            "2024-06-01 10:05,1e309,Infinity\n"   # 3 quarantined: both columns named
            "2024-06-01 10:10,nan,-inf\n"         # 4 quarantined (-inf); nan alone is missing
            "2024-06-01 10:15,NaN,100\n"          # 5 loaded: only G stored
            "2024-06-01 10:20,1e306,100\n")       # 6 quarantined: 1e306 kW overflows in W
    con, _, res = _ingest(tmp_path, body)
    assert (res.rows_read, res.rows_loaded, res.rows_quarantined) == (5, 1, 4)
    assert _quarantine(con) == [
        (2, "column P: 'inf' is infinite or out of range"),
        (3, "column P: '1e309' is infinite or out of range; "
            "column G: 'Infinity' is infinite or out of range"),
        (4, "column G: '-inf' is infinite or out of range"),
        (6, "column P: '1e306' is infinite or out of range"),
    ]
    assert con.execute("SELECT quantity, value FROM readings").fetchall() == [("poa_wm2", 100.0)]


def test_inf_declared_as_a_sentinel_is_missing(tmp_path):
    con, _, res = _ingest(tmp_path, "ts,P,G\n2024-06-01 10:00,inf,100\n", sentinels=["inf"])
    assert (res.rows_loaded, res.rows_quarantined) == (1, 0)
    assert con.execute("SELECT quantity FROM readings").fetchall() == [("poa_wm2",)]


def test_truncated_lines_anywhere_are_quarantined_the_rest_loaded(tmp_path):
    body = ("ts,P,G\n2024-06-01 10:00,1,100\n2024-06-01 10\n2024-06-01 10:10,1,100\n"
            "2024-06-01 10:15,1")
    con, _, res = _ingest(tmp_path, body)
    assert (res.rows_read, res.rows_loaded, res.rows_quarantined) == (4, 2, 2)
    assert _quarantine(con) == [(3, "1 fields where the header has 3"),
                                (5, "truncated last line (2 of 3 fields, no line end)")]


def test_last_line_cut_inside_a_quote(tmp_path):
    con, _, res = _ingest(tmp_path, 'ts,P,G\n2024-06-01 10:00,1,100\n2024-06-01 10:05,1,"10')
    assert (res.rows_loaded, res.rows_quarantined) == (1, 1)
    assert _quarantine(con) == [
        (3, "truncated last line (a quoted field is not closed, no line end)")]


def test_file_names_with_glob_characters_read_that_file(tmp_path):
    # DuckDB reads a path as a glob: x_[a].csv would match x_a.csv, a '*' any file
    for name in ("x_[a].csv", "y_*.csv"):
        site, log = write_case(tmp_path, "ts,P,G\n2024-06-01 10:00,1,100\n", filename=name)
        decoy = tmp_path / name.replace("[a]", "a").replace("*", "1")
        decoy.write_text("ts,P,G\n2024-06-01 10:00,7,700\n")
        dbp = tmp_path / f"{name[0]}.duckdb"
        result = run_ingest(site, log, db=dbp)
        assert result.exit_code == 0, result.output
        con = db.connect(dbp)
        try:
            assert con.execute("SELECT value FROM readings ORDER BY quantity").fetchall() == [
                (1000.0,), (100.0,)]  # 1 kW and 100 W/m2: the named file, not the decoy
        finally:
            con.close()


def test_one_night_row_in_an_empty_month_does_not_crash_the_model(tmp_path):
    # a POA sensor only (no GHI): INV2's planes differ from the sensor's, so the sensor is
    # decomposed by GTI-DIRINT, which needs some sun in front of the sensor (AOI < 90)
    site = make_site(tmp_path, model='irradiance_source = "poa_sensor"')
    con = open_db(tmp_path)
    day = clear_days("2024-06-01", 1).rename(columns={"ghi_wm2": "poa_wm2"})
    store(con, day, "site", file_id=1)
    model.run(con, site)
    # midnight UTC on 15 July is 02:00 in Berlin: the sun is below the horizon at 48 N
    night = pd.DataFrame({"poa_wm2": [0.0], "temp_air_c": [15.0]},
                         index=pd.DatetimeIndex([pd.Timestamp("2024-07-15 00:00", tz="UTC")]))
    store(con, night, "site", file_id=2)
    out = model.run(con, site)  # raised "There are no times with AOI < 90"
    assert out["rows"] == 2


def test_flags_of_ingested_files_are_computed_by_the_next_model_run(tmp_path):
    # 1 kW with 2 W/m2 in the plane: power without irradiance (the quality stage's rule)
    site_path, log = write_case(tmp_path, "ts,P,G\n2024-06-01 10:00,1,2\n")
    con = db.connect(tmp_path / "site.duckdb")
    ingest_files(con, load_site(site_path), [log])  # committed; the flags not yet computed
    assert quality.stale(con)
    con.close()
    result = run_ingest(site_path, log, db=tmp_path / "site.duckdb")
    assert "already ingested" in result.output and "quality flags:" not in result.output
    result = CliRunner().invoke(main, ["model", str(site_path), "--db",
                                       str(tmp_path / "site.duckdb"), "--quiet"])
    assert "quality flags:" in result.output and "power_without_irradiance 1" in result.output
    con = db.connect(tmp_path / "site.duckdb")
    assert not quality.stale(con)
    assert con.execute("SELECT flag FROM flags").fetchall() == [("power_without_irradiance",)]


# --------------------------------------------------------------------------------------------
# write failures: one line, exit 2, no partial output


def _disk_full(*args, **kwargs):
    raise OSError(errno.ENOSPC, "No space left on device")


def test_replacing_file_leaves_nothing_on_failure(tmp_path):
    target = tmp_path / "out" / "claim.zip"
    with pytest.raises(OutputError) as err, atomic.replacing_file(target) as tmp:
        tmp.write_bytes(b"half")
        _disk_full()
    assert str(err.value) == (f"{target}: cannot write (No space left on device); "
                              "nothing was written")
    assert list((tmp_path / "out").iterdir()) == []
    target.write_bytes(b"earlier")  # an earlier output stays as it was
    with pytest.raises(OutputError), atomic.replacing_file(target) as tmp:
        tmp.write_bytes(b"half")
        _disk_full()
    assert [p.name for p in (tmp_path / "out").iterdir()] == ["claim.zip"]
    assert target.read_bytes() == b"earlier"


def test_replacing_dir_keeps_other_files_or_replaces_all(tmp_path):
    target = tmp_path / "report"
    target.mkdir()
    (target / "notes.txt").write_text("mine")
    with atomic.replacing_dir(target) as tmp:
        (tmp / "report.html").write_text("new")
    assert sorted(p.name for p in target.iterdir()) == ["notes.txt", "report.html"]
    with pytest.raises(OutputError), atomic.replacing_dir(target, replace=True) as tmp:
        (tmp / "report.html").write_text("newer")
        _disk_full()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report"]  # no .partial, no .old
    assert (target / "report.html").read_text() == "new"
    with atomic.replacing_dir(target, replace=True) as tmp:
        (tmp / "report.html").write_text("newer")
    assert [p.name for p in target.iterdir()] == ["report.html"]


def test_report_write_failure_is_one_line_and_leaves_no_folder(tmp_path, monkeypatch):
    site_path, _ = write_case(tmp_path, "ts,P,G\n")

    def half_written(con, site, start, end, out_dir, result=None):
        (out_dir / "report.html").write_text("<html>")
        _disk_full()

    monkeypatch.setattr(report, "write_report", half_written)
    out = tmp_path / "reports" / "2024-06"
    r = CliRunner().invoke(main, ["report", str(site_path), "--month", "2024-06",
                                  "--out", str(out)])
    assert r.exit_code == 2
    assert r.stderr == (f"perfcheck: error: {out}: cannot write (No space left on device); "
                        "nothing was written\n")
    assert list((tmp_path / "reports").iterdir()) == []


# --------------------------------------------------------------------------------------------
# property: whatever the lines hold, every line lands in one place and nothing stored is bad

GARBAGE = ("inf", "-Infinity", "1e309", "nan", "", "x", '"1', "1,2", "9" * 400)
EXAMPLES = int(os.environ.get("PERFCHECK_FUZZ_EXAMPLES", "15"))  # raise it for a long run


@st.composite
def logger_lines(draw):
    """(lines, expected): data lines of a 5-minute file, good ones with their (P kW, G W/m2)
    and bad ones (a garbage field, a bad or out-of-range time, a line cut short), invented."""
    n = draw(st.integers(1, 12))
    lines, good = [], {}
    for i in range(n):
        ts = f"2024-06-01 {10 + i // 12:02d}:{5 * (i % 12):02d}"
        p = draw(st.floats(0, 10, allow_nan=False).map(lambda v: round(v, 3)))
        g = draw(st.integers(0, 1200))
        kind = draw(st.sampled_from(["good", "good", "field", "time", "cut"]))
        if kind == "good":
            lines.append(f"{ts},{p},{g}")
            good[i + 2] = (p * 1e3, float(g))  # line number: the header is line 1
        elif kind == "field":
            lines.append(f"{ts},{draw(st.sampled_from(GARBAGE))},{g}")
        elif kind == "time":
            lines.append(f"{draw(st.sampled_from(['24-06-01 10:00', '2300-01-01 00:00']))},1,1")
        else:
            lines.append(f"{ts},{p}")
    return lines, good, draw(st.booleans())


@settings(max_examples=EXAMPLES, deadline=None)
@given(case=logger_lines())
def test_any_lines_balance_and_store_only_good_values(tmp_path_factory, case):
    lines, good, final_newline = case
    body = "ts,P,G\n" + "\n".join(lines) + ("\n" if final_newline else "")
    with tempfile.TemporaryDirectory(dir=tmp_path_factory.getbasetemp()) as tmp:
        site_path, log = write_case(Path(tmp), body)
        con = db.connect(Path(tmp) / "site.duckdb")
        try:
            (res,) = ingest_files(con, load_site(site_path), [log])
            assert res.rows_read == len(lines)
            assert res.rows_read == res.rows_loaded + res.rows_duplicate + res.rows_quarantined
            stored = con.execute("SELECT line, quantity, value, ts FROM readings").fetchall()
        finally:
            con.close()
    by_line: dict[int, dict[str, float]] = {}
    for line, quantity, value, _ts in stored:
        by_line.setdefault(line, {})[quantity] = value
    # each good line stored as written (kW to W), and nothing else stored: a 'nan' field
    # (missing) is the one bad field that leaves the rest of its line loaded
    assert {k: v for k, v in by_line.items() if k in good} == {
        k: {"ac_power_w": p, "poa_wm2": g} for k, (p, g) in good.items()}
    for line, values in by_line.items():
        assert line in good or set(values) == {"poa_wm2"}, (line, values)


def test_data_line_with_bytes_that_are_not_utf8_is_quarantined(tmp_path):
    # a corrupt line (one byte from another encoding, or noise) in the middle of a file
    body = "ts,P,G\n2024-06-01 10:00,1,100\n2024-06-01 10:05,1,\xb0\n2024-06-01 10:10,2,200\n"
    con, _, res = _ingest(tmp_path, body.encode("latin-1"))
    assert (res.rows_read, res.rows_loaded, res.rows_quarantined) == (3, 2, 1)
    assert con.execute("SELECT line, reason, raw FROM quarantine").fetchall() == [
        (3, "byte 0xb0 at column 20 is not UTF-8", "2024-06-01 10:05,1,\ufffd")]
    assert sorted(r[0] for r in con.execute("SELECT line FROM readings").fetchall()) == [
        2, 2, 4, 4]
