"""Ingest: logger habits, time conventions, units, accounting, idempotency, conflicts, atomicity."""

from __future__ import annotations

import calendar
import datetime as dt
import multiprocessing as mp
import time

import numpy as np
import pandas as pd
import pytest
from logger_files import logger_toml, run_ingest, write_case
from numpy.testing import assert_allclose

from perfcheck import db, quality, status
from perfcheck.errors import LoggerFileError, SiteFileError
from perfcheck.ingest import (
    channel_intervals,
    coverage_summary,
    expand_paths,
    ingest_files,
    logger_files,
)
from perfcheck.site import load_site

UTC = dt.UTC


def ingest(tmp_path, body, **kw):
    site_path, log = write_case(tmp_path, body, **kw)
    site = load_site(site_path)
    con = db.connect(tmp_path / "site.duckdb")
    results = ingest_files(con, site, [log])
    return con, site, results


def series(con, quantity, device=None):
    """ts -> value of one quantity, as a pandas Series with a UTC index."""
    df = con.execute(
        "SELECT ts, value FROM readings WHERE quantity = ? AND (? IS NULL OR device = ?) "
        "ORDER BY ts", [quantity, device, device]).df()
    return pd.Series(df["value"].to_numpy(), index=pd.DatetimeIndex(df["ts"]).tz_convert("UTC"))


def utc(*args):
    return pd.Timestamp(dt.datetime(*args, tzinfo=UTC))


# --------------------------------------------------------------------------------------------
# format habits


@pytest.mark.parametrize(
    "delimiter, decimal, body",
    [
        (",", ".", "ts,P,G\n2024-06-01 10:00,1.5,500.5\n2024-06-01 10:05,2.25,600\n"),
        (";", ",", "ts;P;G\n2024-06-01 10:00;1,5;500,5\n2024-06-01 10:05;2,25;600\n"),
        ("\t", ".", "ts\tP\tG\n2024-06-01 10:00\t1.5\t500.5\n2024-06-01 10:05\t2.25\t600\n"),
        # a comma-delimited file with decimal commas needs quotes
        (",", ",", 'ts,P,G\n2024-06-01 10:00,"1,5","500,5"\n2024-06-01 10:05,"2,25",600\n'),
    ],
    ids=["comma", "semicolon-decimal-comma", "tab", "quoted-decimal-comma"],
)
def test_delimiters_and_decimal_separators(tmp_path, delimiter, decimal, body):
    con, _, (res,) = ingest(tmp_path, body, delimiter=delimiter, decimal=decimal)
    assert (res.rows_read, res.rows_loaded, res.rows_quarantined) == (2, 2, 0)
    # 1.5 kW = 1500 W (SI prefix k = 10^3, BIPM SI Brochure, 9th ed. 2019, table 7)
    assert_allclose(series(con, "ac_power_w").to_numpy(), [1500.0, 2250.0], rtol=1e-12)
    assert_allclose(series(con, "poa_wm2").to_numpy(), [500.5, 600.0], rtol=1e-12)


def test_preamble_units_row_quotes_bom_crlf(tmp_path):
    body = ("\ufeffLogger X200 export\r\nSerial;12345\r\n"
            '"ts";"P";"G"\r\n"";"kW";"W/m2"\r\n'
            '"2024-06-01 10:00";"1,5";"500"\r\n"2024-06-01 10:05";"2";"600"\r\n')
    con, _, (res,) = ingest(tmp_path, body, delimiter=";", decimal=",", preamble_lines=2,
                            units_row=True)
    assert (res.rows_read, res.rows_loaded) == (2, 2)
    s = series(con, "ac_power_w")
    assert list(s.index) == [utc(2024, 6, 1, 10, 0), utc(2024, 6, 1, 10, 5)]
    assert_allclose(s.to_numpy(), [1500.0, 2000.0], rtol=1e-12)
    # line numbers count every physical line: preamble 1-2, header 3, units 4, data from 5
    assert con.execute("SELECT min(line) FROM readings").fetchall() == [(5,)]


def test_quoted_field_with_delimiter_and_escaped_quote(tmp_path):
    body = 'ts,note,P,G\n2024-06-01 10:00,"a, ""b""",1,2\n2024-06-01 10:05,"x,2\n'
    con, _, (res,) = ingest(tmp_path, body)
    assert (res.rows_loaded, res.rows_quarantined) == (1, 1)
    assert con.execute("SELECT line, reason FROM quarantine").fetchall() == [
        (3, "a quoted field is not closed")]


def test_sentinels_are_missing_values_not_readings(tmp_path):
    body = "ts,P,G\n2024-06-01 10:00,-9999,#N/A\n2024-06-01 10:05,NaN,100\n"
    con, _, (res,) = ingest(tmp_path, body, sentinels=["-9999", "#N/A"])
    assert (res.rows_read, res.rows_loaded, res.rows_quarantined) == (2, 2, 0)
    assert con.execute("SELECT quantity, value FROM readings").fetchall() == [("poa_wm2", 100.0)]


# --------------------------------------------------------------------------------------------
# time conventions


@pytest.mark.parametrize(
    "kind, fmt, columns, header, rows",
    [
        ("iso", None, ("ts",), "ts", ["2024-06-01T12:00:00+02:00", "2024-06-01T10:05:00Z"]),
        ("utc", "%Y-%m-%d %H:%M:%S", ("ts",), "ts", ["2024-06-01 10:00:00",
                                                     "2024-06-01 10:05:00"]),
        ("utc", "%d.%m.%Y %H:%M", ("Datum", "Zeit"), "Datum,Zeit",
         ["01.06.2024,10:00", "01.06.2024,10:05"]),
        ("local", "%d.%m.%Y %H:%M", ("ts",), "ts", ["01.06.2024 12:00", "01.06.2024 12:05"]),
        # 1717236000 s after 1970-01-01T00:00Z is 2024-06-01T10:00Z (POSIX time, IEEE 1003.1)
        ("epoch", None, ("ts",), "ts", ["1717236000", "1717236300"]),
    ],
    ids=["iso-offset", "naive-utc", "date-and-time-columns", "local-summer", "epoch"],
)
def test_time_kinds(tmp_path, kind, fmt, columns, header, rows):
    body = f"{header},P,G\n" + "".join(f"{r},1,2\n" for r in rows)
    con, _, (res,) = ingest(tmp_path, body, time_kind=kind, time_format=fmt,
                            time_columns=columns)
    assert res.rows_loaded == 2, con.execute("SELECT * FROM quarantine").fetchall()
    # Europe/Berlin is UTC+2 in June (summer time, Directive 2000/84/EC)
    assert list(series(con, "ac_power_w").index) == [utc(2024, 6, 1, 10, 0),
                                                     utc(2024, 6, 1, 10, 5)]


def test_iso_without_offset_is_quarantined(tmp_path):
    con, _, (res,) = ingest(tmp_path, "ts,P,G\n2024-06-01T10:00:00,1,2\n", time_kind="iso")
    assert res.rows_quarantined == 1
    assert con.execute("SELECT reason FROM quarantine").fetchall() == [
        ("time '2024-06-01T10:00:00' has no UTC offset",)]


@pytest.mark.parametrize("interval", [1, 5, 10, 15, 30, 60])
def test_interval_end_labels_become_interval_start(tmp_path, interval):
    stamps = pd.date_range("2024-06-01 10:00", periods=3, freq=f"{interval}min")
    body = "ts,P,G\n" + "".join(f"{t:%Y-%m-%d %H:%M},1,2\n" for t in stamps)
    con, _, _ = ingest(tmp_path, body, interval_min=interval, label="end")
    got = series(con, "ac_power_w").index
    expected = (stamps - pd.Timedelta(minutes=interval)).tz_localize("UTC")
    assert list(got) == list(expected)


def _last_sunday(year, month):
    """Last Sunday of a month, from the calendar alone (not from any time-zone database)."""
    last = calendar.monthrange(year, month)[1]
    return max(d for d in range(last - 6, last + 1)
               if calendar.weekday(year, month, d) == calendar.SUNDAY)


def test_dst_autumn_repeated_hour_resolved_by_order(tmp_path):
    # Directive 2000/84/EC, art. 2-3: summer time ends at 01:00 UTC on the last Sunday of
    # October. Europe/Berlin is then UTC+2 before and UTC+1 after; local 02:00-02:59 repeats.
    day = _last_sunday(2024, 10)
    assert day == 27
    change = utc(2024, 10, day, 1, 0)
    local = [f"2024-10-{day} {h:02d}:{m:02d}" for h in (1, 2) for m in range(0, 60, 15)]
    local += [f"2024-10-{day} 02:{m:02d}" for m in range(0, 60, 15)]
    local += [f"2024-10-{day} 03:00"]
    body = "ts,P,G\n" + "".join(f"{t},{i},1\n" for i, t in enumerate(local))
    con, _, (res,) = ingest(tmp_path, body, time_kind="local", interval_min=15)
    assert (res.rows_loaded, res.rows_duplicate, res.rows_quarantined) == (len(local), 0, 0)
    s = series(con, "ac_power_w")
    # nothing dropped or merged: 13 distinct instants, 15 minutes apart, in file order
    expected = pd.date_range(change - pd.Timedelta(hours=2), periods=len(local), freq="15min")
    assert list(s.index) == list(expected)
    assert_allclose(s.to_numpy(), 1000.0 * np.arange(len(local)), rtol=0)  # P in kW
    # the first line read with the winter offset (02:00 the second time) is the changeover
    assert s.index[8] == change and s.iloc[8] == 8000.0


def test_dst_spring_skipped_hour(tmp_path):
    # Directive 2000/84/EC, art. 2: summer time begins at 01:00 UTC on the last Sunday of
    # March; in Europe/Berlin local 02:00-02:59 does not exist that day.
    day = _last_sunday(2024, 3)
    assert day == 31
    change = utc(2024, 3, day, 1, 0)
    local = ["01:30", "01:45", "03:00", "03:15", "02:30"]
    body = "ts,P,G\n" + "".join(f"2024-03-{day} {t},1,1\n" for t in local)
    con, _, (res,) = ingest(tmp_path, body, time_kind="local", interval_min=15)
    assert (res.rows_loaded, res.rows_quarantined) == (4, 1)
    assert list(series(con, "ac_power_w").index) == [
        change - pd.Timedelta(minutes=30), change - pd.Timedelta(minutes=15), change,
        change + pd.Timedelta(minutes=15)]
    assert con.execute("SELECT line, reason FROM quarantine").fetchall() == [
        (6, f"local time '2024-03-{day} 02:30' does not exist in Europe/Berlin "
            "(clocks went forward)")]


# --------------------------------------------------------------------------------------------
# units


@pytest.mark.parametrize(
    "quantity, unit, raw, stored, si",
    [
        # SI prefixes k = 1e3, M = 1e6 (BIPM SI Brochure, 9th ed. 2019, table 7)
        ("ac_power", "W", 1234.5, "ac_power_w", 1234.5),
        ("ac_power", "kW", 1.2345, "ac_power_w", 1234.5),
        ("ac_power", "MW", 0.0012345, "ac_power_w", 1234.5),
        ("energy_register", "Wh", 5e6, "energy_register_wh", 5e6),
        ("energy_register", "kWh", 5000.0, "energy_register_wh", 5e6),
        ("energy_register", "MWh", 5.0, "energy_register_wh", 5e6),
        ("energy_interval", "kWh", 0.25, "energy_interval_wh", 250.0),
        # t/C = T/K - 273.15 (BIPM SI Brochure, 9th ed. 2019, section 2.3.1)
        ("temp_air", "K", 298.15, "temp_air_c", 25.0),
        ("temp_module", "C", 41.5, "temp_module_c", 41.5),
        # 1 km/h = 1000 m / 3600 s
        ("wind_speed", "km/h", 36.0, "wind_speed_ms", 10.0),
        ("rain", "mm", 0.4, "rain_mm", 0.4),
        ("ghi", "W/m2", 812.0, "ghi_wm2", 812.0),
    ],
)
def test_units_are_converted_to_si(tmp_path, quantity, unit, raw, stored, si):
    inverter = "INV1" if quantity in ("ac_power", "energy_register", "energy_interval") else None
    con, _, _ = ingest(tmp_path, f"ts,X\n2024-06-01 10:00,{raw!r}\n",
                       columns=(("X", quantity, unit, inverter),))
    assert_allclose(series(con, stored).to_numpy(), [si], rtol=1e-12)


def test_every_unit_the_site_file_accepts_has_a_conversion():
    from perfcheck.ingest import UNIT_TO_SI
    from perfcheck.site import QUANTITIES

    # status codes are stored as written, not converted
    assert {u for q, (_, units) in QUANTITIES.items() if q != "status"
            for u in units} == set(UNIT_TO_SI)


# --------------------------------------------------------------------------------------------
# accounting, idempotency, conflicts


MIXED = (
    "ts,P,G\n"
    "2024-06-01 10:00,1,100\n"       # 2 loaded
    "2024-06-01 10:05,x,100\n"       # 3 quarantined: not a number
    "\n"                             # 4 blank: not a row
    "2024-06-01 10:10,2,200\n"       # 5 loaded
    "2024-06-01 10:10,2,200\n"       # 6 duplicate of line 5
    "2024-06-01 10:10,3,200\n"       # 7 quarantined: same time, different value
    "2024-06-01 10:15,4\n"           # 8 quarantined: too few fields
    "not a time,5,5\n"               # 9 quarantined: bad time
    "2024-06-01 10:20,5,500\n"       # 10 loaded
)


def test_accounting_every_row_in_exactly_one_place(tmp_path):
    con, _, (res,) = ingest(tmp_path, MIXED)
    assert (res.rows_read, res.rows_loaded, res.rows_duplicate, res.rows_quarantined) == (
        8, 3, 1, 4)
    assert res.rows_read == res.rows_loaded + res.rows_duplicate + res.rows_quarantined
    stored = con.execute("SELECT rows_read, rows_loaded, rows_duplicate, rows_quarantined, "
                         "conflicts FROM source_files").fetchall()
    assert stored == [(8, 3, 1, 4, 1)]
    assert con.execute("SELECT line, raw, reason FROM quarantine ORDER BY line").fetchall() == [
        (3, "2024-06-01 10:05,x,100", "column P: 'x' is not a number"),
        (7, "2024-06-01 10:10,3,200",
         "same time as line 5 with different values (see table conflicts)"),
        (8, "2024-06-01 10:15,4", "2 fields where the header has 3"),
        (9, "not a time,5,5", "time 'not a time' does not match the format '%Y-%m-%d %H:%M'"),
    ]
    assert con.execute("SELECT DISTINCT line FROM readings ORDER BY line").fetchall() == [
        (2,), (5,), (10,)]
    assert con.execute("SELECT stored_value, new_value, stored_line, new_line FROM conflicts"
                       ).fetchall() == [(2000.0, 3000.0, 5, 7)]


def test_same_file_again_changes_nothing(tmp_path):
    con, site, (first,) = ingest(tmp_path, MIXED)
    before = {t: con.execute(f"SELECT count(*) FROM {t}").fetchall()
              for t in ("channel_values", "quarantine", "conflicts", "source_files")}
    copy = tmp_path / "copy_of_log.csv"
    copy.write_bytes((tmp_path / "log.csv").read_bytes())
    again = ingest_files(con, site, [tmp_path / "log.csv", copy])
    assert [r.status for r in again] == ["already ingested"] * 2
    assert {r.file_id for r in again} == {first.file_id}
    after = {t: con.execute(f"SELECT count(*) FROM {t}").fetchall() for t in before}
    assert after == before


def test_what_is_stored_is_the_version_that_was_checked(tmp_path, monkeypatch):
    # A logger file still being written can change between its check and its storing: the
    # stored readings, copy and sha256 are of one version (the one checked), or the file is
    # refused whole with its one-line error (common practice for provenance).
    import hashlib
    import zlib

    import perfcheck.ingest

    site_path, first = write_case(tmp_path, "ts,P,G\n2024-06-01 10:00,1,100\n")
    second = tmp_path / "second.csv"
    second.write_text("ts,P,G\n2024-06-01 10:05,2,200\n")
    checked = first.read_bytes()
    check = perfcheck.ingest._check

    def check_then_append(site, path):  # the first file grows just after its check
        out = check(site, path)
        if path == first:
            first.write_text(checked.decode() + "2024-06-01 10:10,9,900\n")
        return out

    def rewrite_second(res):  # the second file changes once the first is stored
        second.write_text("ts,P,G\n2024-06-01 10:05,3,300\n")

    monkeypatch.setattr(perfcheck.ingest, "_check", check_then_append)
    con = db.connect(tmp_path / "site.duckdb")
    with pytest.raises(LoggerFileError, match=f"^{second}: changed while being ingested; "
                                              "nothing of this file was stored$"):
        ingest_files(con, load_site(site_path), [first, second], progress=rewrite_second)
    assert_allclose(series(con, "ac_power_w").to_numpy(), [1000.0])
    (sha, copy), = con.execute("SELECT sha256, zlib_bytes FROM source_copies").fetchall()
    assert (sha, zlib.decompress(copy)) == (hashlib.sha256(checked).hexdigest(), checked)
    assert con.execute("SELECT sha256, rows_read FROM source_files").fetchall() == [(sha, 1)]


def test_overlapping_exports_duplicates_and_conflicts(tmp_path):
    con, site, _ = ingest(tmp_path, "ts,P,G\n2024-06-01 10:00,1,100\n2024-06-01 10:05,2,200\n")
    second = tmp_path / "second.csv"
    # 10:00 identical (kW 1 == W 1000), 10:05 differs in G, 10:10 new
    second.write_text("ts,P,G\n2024-06-01 10:00,1.0,100\n2024-06-01 10:05,2,250\n"
                      "2024-06-01 10:10,3,300\n")
    (res,) = ingest_files(con, site, [second])
    assert (res.rows_read, res.rows_loaded, res.rows_duplicate, res.rows_quarantined,
            res.conflicts) == (3, 1, 1, 1, 1)
    # the stored value is kept, the new one is in conflicts
    assert_allclose(series(con, "poa_wm2").to_numpy(), [100.0, 200.0, 300.0], rtol=0)
    assert con.execute("SELECT ts, quantity, device, stored_value, new_value, stored_file_id, "
                       "stored_line, new_file_id, new_line FROM conflicts").fetchall() == [
        (utc(2024, 6, 1, 10, 5).to_pydatetime(), "poa_wm2", "site", 200.0, 250.0, 1, 3, 2, 3)]
    assert con.execute("SELECT reason FROM quarantine").fetchall() == [
        ("1 value(s) differ from those stored from file 1 line 3 (see table conflicts)",)]


def test_expand_paths_sorted_globs(tmp_path):
    for name in ("b.csv", "a.csv", "c.txt"):
        (tmp_path / name).write_text("x")
    assert expand_paths([str(tmp_path / "*.csv")]) == [tmp_path / "a.csv", tmp_path / "b.csv"]


def test_coverage_summary(tmp_path):
    # 10:00 .. 10:55 at 5 min = 12 intervals; 10:20 missing for P and G, 10:25 has no G
    stamps = [f"2024-06-01 10:{m:02d}" for m in range(0, 60, 5) if m != 20]
    body = "ts,P,G\n" + "".join(f"{t},1,{'' if t.endswith(':25') else 5}\n" for t in stamps)
    body += "2024-06-01 10:57,x,1\n"
    con, site, _ = ingest(tmp_path, body)
    cov = coverage_summary(con, site).set_index(["device", "quantity"])
    assert list(cov["month"]) == ["2024-06", "2024-06"]
    assert cov.loc[("INV1", "ac_power_w"), ["expected", "present", "quarantined"]].tolist() == [
        12, 11, 1]
    assert cov.loc[("site", "poa_wm2"), ["expected", "present"]].tolist() == [12, 10]
    assert_allclose(cov.loc[("site", "poa_wm2"), "share"], 10 / 12, rtol=1e-12)


# --------------------------------------------------------------------------------------------
# atomicity


class _PausesAfterStoring:
    """A connection that, once the file's readings are inserted (not yet committed), leaves a
    marker file and waits: the test kills the process right there."""

    def __init__(self, con, marker):
        self._con, self._marker = con, marker

    def execute(self, query, params=None):
        result = self._con.execute(query, params)
        if query.lstrip().startswith("INSERT INTO logger_rows_"):
            self._marker.write_text("inside the transaction")
            time.sleep(120)
        return result


def _ingest_in_child(site_path: str, log: str, db_path: str, marker: str) -> None:
    from pathlib import Path

    con = _PausesAfterStoring(db.connect(db_path), Path(marker))
    ingest_files(con, load_site(site_path), [log])


def test_kill_mid_file_leaves_database_as_before(tmp_path):
    con, site, _ = ingest(tmp_path, "ts,P,G\n2024-01-01 00:00,1,1\n")

    def state(c):
        return [c.execute(f"SELECT count(*) FROM {t}").fetchall()
                for t in ("channel_values", "quarantine", "source_files", "channels")]

    before = state(con)
    con.close()
    big = tmp_path / "big.csv"
    stamps = pd.date_range("2024-02-01", periods=100_000, freq="min")
    frame = pd.DataFrame({"ts": stamps.strftime("%Y-%m-%d %H:%M"), "P": "1.0", "G": 2.0})
    frame.loc[5, "P"] = "bad"  # so that quarantine is written inside the transaction too
    frame.to_csv(big, index=False)
    marker = tmp_path / "marker"
    child = mp.get_context("spawn").Process(
        target=_ingest_in_child,
        args=(str(tmp_path / "site.toml"), str(big), str(tmp_path / "site.duckdb"), str(marker)))
    child.start()
    deadline = time.monotonic() + 120
    while not marker.exists() and child.is_alive() and time.monotonic() < deadline:
        time.sleep(0.01)
    assert marker.exists(), "the child never reached the insert"
    child.kill()  # SIGKILL: no rollback, no clean-up, the transaction is simply cut off
    child.join()
    con = db.connect(tmp_path / "site.duckdb")
    assert state(con) == before
    # and the same file can then be ingested in full
    (res,) = ingest_files(con, site, [big])
    assert (res.rows_loaded, res.rows_quarantined) == (99_999, 1)


# --------------------------------------------------------------------------------------------
# errors a user will hit: one line naming file and line, exit 2, nothing stored is lost

GOOD = "ts,P,G\n2024-06-01 10:00,1,100\n"


def _db_state(path):
    con = db.connect(path)
    try:
        return [con.execute(f"SELECT count(*) FROM {t}").fetchall()
                for t in ("channel_values", "quarantine", "conflicts", "source_files")]
    finally:
        con.close()


@pytest.mark.parametrize(
    "name, content, message",
    [
        ("missing.csv", None, "{f}: file not found"),
        ("folder.csv", "dir", "{f}: is a directory, not a logger file"),
        ("empty.csv", b"", "{f}: empty file (0 bytes, no lines)"),
        ("blank.csv", b"\xef\xbb\xbf\r\n\r\n", "{f}: empty file (7 bytes, no lines)"),
        ("header.csv", b"ts,P,G\r\n", "{f}: empty file (no data lines after the header, line 1)"),
        # a header that is not UTF-8 (a data line that is not is quarantined, see
        # test_fuzz_findings.py)
        ("latin1.csv", "ts,P,G \xb0C\n2024-06-01 10:00,1,2\n".encode("latin-1"),
         "{f}: line 1: byte 0xb0 at column 8 is not UTF-8 (save the file as UTF-8)"),
        # fuzz findings (issue 10): a header ending in a lone CR, a 128 kB header field
        ("cr.csv", b"ts,P,G\r2024-06-01 10:00,1,2\n",
         "{f}: line 1: holds a carriage return (CR) not followed by a line feed; save the file "
         "with LF or CRLF line ends"),
        ("wide.csv", b"ts,P,G" + b"x" * 131072 + b"\n2024-06-01 10:00,1,2\n",
         "{f}: line 1: cannot be split into fields (field larger than field limit (131072))"),
        ("semicolon.csv", b"ts;P;G\n2024-06-01 10:00;1;2\n",
         "{f}: line 1: no column 'ts' (mapped in [[loggers]] 'main'); found 1 column(s) with "
         "delimiter ',': 'ts;P;G'; the header holds ';': is delimiter ',' right?"),
        ("renamed.csv", b"time,P,G\n2024-06-01 10:00,1,2\n",
         "{f}: line 1: no column 'ts' (mapped in [[loggers]] 'main'); found 3 column(s) with "
         "delimiter ',': 'time', 'P', 'G'"),
        ("log.txt", b"ts,P,G\n",
         "{f}: no [[loggers]] entry matches this file name (match globs: '*.csv')"),
    ],
)
def test_bad_logger_file_errors(tmp_path, name, content, message):
    site, good = write_case(tmp_path, GOOD)
    dbp = tmp_path / "site.duckdb"
    assert run_ingest(site, good, db=dbp).exit_code == 0
    before = _db_state(dbp)
    bad = tmp_path / name
    if content == "dir":
        bad.mkdir()
    elif content is not None:
        bad.write_bytes(content)
    # the bad file comes second: nothing of the good third file is stored either, since all
    # files are checked before any is read
    third = tmp_path / "third.csv"
    third.write_text("ts,P,G\n2024-06-02 10:00,1,100\n")
    result = run_ingest(site, good, bad, third, db=dbp)
    assert result.exit_code == 2
    assert result.stderr == f"perfcheck: error: {message.format(f=bad)}\n"
    assert "Traceback" not in result.output
    assert _db_state(dbp) == before


def test_glob_that_matches_nothing(tmp_path):
    site, _ = write_case(tmp_path, GOOD)
    result = run_ingest(site, str(tmp_path / "nope_*.csv"))
    assert result.exit_code == 2
    assert result.stderr == (f"perfcheck: error: {tmp_path}/nope_*.csv: "
                             "no file matches this pattern\n")


def test_cli_prints_accounting_and_says_when_nothing_changed(tmp_path):
    site, log = write_case(tmp_path, MIXED)
    first = run_ingest(site, log)
    assert first.exit_code == 0, first.output
    assert first.stdout.splitlines()[0] == (
        f"{log}: 8 rows read = 3 loaded + 1 duplicate + 4 quarantined; 1 conflicting values, "
        "2024-06-01 10:00 to 2024-06-01 10:20 UTC")
    assert first.stdout.splitlines()[-1].startswith("total: 1 file(s) loaded, 0 already")
    again = run_ingest(site, log)
    assert again.exit_code == 0
    assert again.stdout == (
        f"{log}: already ingested (file 1), nothing changed\n"
        "total: 0 file(s) loaded, 1 already ingested; 0 rows read = 0 loaded + 0 duplicate"
        " + 0 quarantined; 0 conflicting values\n")
    assert (tmp_path / "site.duckdb").exists()  # default: beside the site file


def test_two_loggers_share_instants_without_conflicts(tmp_path):
    # an inverter logger and a weather logger write the same instants: different channels,
    # so neither is a duplicate or a conflict of the other
    weather = logger_toml(name="weather", match="wx_*.csv", interval_min=10, time_kind="iso",
                          time_columns=("time",),
                          columns=(("ghi", "ghi", "W/m2", None), ("t", "temp_air", "K", None)))
    site_path, inv = write_case(tmp_path, "ts,P,G\n2024-06-01 10:00,1,100\n",
                                filename="inv_1.csv",
                                loggers=logger_toml(match="inv_*.csv") + weather)
    wx = tmp_path / "wx_1.csv"
    wx.write_text("time,ghi,t\n2024-06-01T12:00:00+02:00,800,293.15\n")
    site = load_site(site_path)
    con = db.connect(tmp_path / "site.duckdb")
    results = ingest_files(con, site, [inv, wx])
    assert [(r.rows_loaded, r.rows_duplicate, r.conflicts) for r in results] == [(1, 0, 0),
                                                                                  (1, 0, 0)]
    assert con.execute("SELECT quantity, device, round(value, 9) FROM readings ORDER BY quantity"
                       ).fetchall() == [("ac_power_w", "INV1", 1000.0), ("ghi_wm2", "site", 800.0),
                                        ("poa_wm2", "site", 100.0), ("temp_air_c", "site", 20.0)]


def test_end_of_day_written_as_24_00(tmp_path):
    body = "ts,P,G\n01.06.2024 23:55,1,1\n01.06.2024 24:00,2,2\n02.06.2024 00:05,3,3\n"
    con, _, (res,) = ingest(tmp_path, body, time_format="%d.%m.%Y %H:%M", label="end")
    assert res.rows_loaded == 3
    # interval ends 23:55, 24:00 (= 00:00 next day), 00:05 -> starts 23:50, 23:55, 00:00
    assert list(series(con, "ac_power_w").index) == [
        utc(2024, 6, 1, 23, 50), utc(2024, 6, 1, 23, 55), utc(2024, 6, 2, 0, 0)]


def test_epoch_in_milliseconds_is_refused_per_line(tmp_path):
    con, _, (res,) = ingest(tmp_path, "ts,P,G\n1717236000000,1,2\n1717236300,1,2\n",
                            time_kind="epoch")
    assert (res.rows_loaded, res.rows_quarantined) == (1, 1)
    assert con.execute("SELECT reason FROM quarantine").fetchall() == [
        ("time '1717236000000' is not a number of seconds since 1970",)]


def test_a_later_export_that_fills_a_missing_value(tmp_path):
    # the first export lacks G at 10:00; a later one has it: the line is loaded, but only its
    # new value is stored, P is not stored twice
    con, site, _ = ingest(tmp_path, "ts,P,G\n2024-06-01 10:00,1,\n")
    later = tmp_path / "later.csv"
    later.write_text("ts,P,G\n2024-06-01 10:00,1,100\n")
    (res,) = ingest_files(con, site, [later])
    assert (res.rows_loaded, res.rows_duplicate, res.rows_quarantined) == (1, 0, 0)
    assert con.execute("SELECT quantity, value, file_id FROM readings ORDER BY quantity"
                       ).fetchall() == [("ac_power_w", 1000.0, 1), ("poa_wm2", 100.0, 2)]


def test_units_row_that_is_data(tmp_path):
    site, log = write_case(tmp_path, "ts,P,G\n2024-06-01 10:00,1,2\n2024-06-01 10:05,1,2\n",
                           units_row=True)
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == (
        f"perfcheck: error: {log}: line 2: expected the units row (units_row = true in "
        "[[loggers]] 'main') but column 'P' holds the number '1'\n")


def test_logger_files_of_a_folder(tmp_path):
    site_path, log = write_case(tmp_path, GOOD)
    (tmp_path / "notes.txt").write_text("x")
    (tmp_path / "sub.csv").mkdir()
    assert logger_files(load_site(site_path), tmp_path) == [log]


def test_dst_autumn_with_interval_end_labels(tmp_path):
    # As above (Directive 2000/84/EC), for a logger labelling interval ends: the interval that
    # ends at the changeover, 01:00 UTC, is labelled 02:00 on the winter clock, after 02:45.
    local = ["01:15", "01:30", "01:45", "02:00", "02:15", "02:30", "02:45",
             "02:00", "02:15", "02:30", "02:45", "03:00"]
    body = "ts,P,G\n" + "".join(f"2024-10-27 {t},1,1\n" for t in local)
    con, _, (res,) = ingest(tmp_path, body, time_kind="local", interval_min=15, label="end")
    assert res.rows_loaded == len(local)
    change = utc(2024, 10, 27, 1, 0)
    expected = pd.date_range(change - pd.Timedelta(minutes=120), periods=len(local),
                             freq="15min")
    assert list(series(con, "ac_power_w").index) == list(expected)
    assert expected[7] + pd.Timedelta(minutes=15) == change  # the one ending at 01:00 UTC


def test_each_loggers_interval_is_stored_and_read_back(tmp_path):
    # issue 9: later stages read the interval stored at ingest, not the site file again
    con, site, _ = ingest(tmp_path, "ts,P,G\n2024-06-01 10:00,1,100\n2024-06-01 10:05,1,100\n")
    assert con.execute("SELECT name, interval_min FROM loggers").fetchall() == [("main", 5)]
    assert channel_intervals(con) == {("ac_power_w", "INV1"): 300, ("poa_wm2", "site"): 300}
    # a second logger carrying the same channel at 1 minute: the shortest interval wins
    other = tmp_path / "fast.dat"
    other.write_text("ts,P\n2024-06-01 11:00,1\n")
    (tmp_path / "site.toml").write_text((tmp_path / "site.toml").read_text() + "\n" + logger_toml(
        name="fast", match="*.dat", interval_min=1, columns=(("P", "ac_power", "kW", "INV1"),)))
    ingest_files(con, load_site(tmp_path / "site.toml"), [other])
    assert channel_intervals(con) == {("ac_power_w", "INV1"): 60, ("poa_wm2", "site"): 300}


@pytest.mark.parametrize("units", ['"";"[KW]";"W/m²"', '"";"kW";"W/m^2"', ';;'])
def test_units_row_agrees_with_the_site_file(tmp_path, units):
    # spellings of the same unit, and a units row that leaves a column blank
    body = f'"ts";"P";"G"\n{units}\n"2024-06-01 10:00";"1,5";"500"\n'
    _, _, (res,) = ingest(tmp_path, body, delimiter=";", decimal=",", units_row=True)
    assert res.rows_loaded == 1


def test_units_row_that_disagrees_refuses_the_file(tmp_path):
    # issue 10: AC power written in kW under a site file saying W became a false outage
    site, log = write_case(tmp_path, "ts,P,G\n,kW,W/m2\n2024-06-01 10:00,48.857,500\n",
                           units_row=True,
                           columns=(("P", "ac_power", "W", "INV1"), ("G", "poa", "W/m2", None)))
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == (
        f"perfcheck: error: {log}: line 2: column 'P' is in 'kW' by the units row but in 'W' "
        "by [[loggers]] 'main'; correct the unit in the site file (or, for one file, add a "
        "[[loggers]] entry whose match names it)\n")


def test_quarantine_command_lists_lines_and_counts(tmp_path):
    # issue 10 item 7: the quarantined lines of MIXED (above), with their reasons, made visible
    from click.testing import CliRunner

    from perfcheck.cli import main

    site, log = write_case(tmp_path, MIXED + "2024-06-01 10:25,y,600\n")
    assert run_ingest(site, log).exit_code == 0
    out_csv = tmp_path / "q.csv"
    r = CliRunner().invoke(main, ["quarantine", str(site), "--limit", "2", "--csv",
                                  str(out_csv)])
    assert r.exit_code == 0, r.output
    assert r.output.splitlines() == [
        f"{log}:3: column P: 'x' is not a number",
        "    2024-06-01 10:05,x,100",
        f"{log}:7: same time as line 5 with different values (see table conflicts)",
        "    2024-06-01 10:10,3,200",
        "... 3 more line(s) not shown (--limit)",
        "counts by reason:",
        "        2  column P: '...' is not a number",
        "        1  same time as line 5 with different values (see table conflicts)",
        "        1  2 fields where the header has 3",
        "        1  time '...' does not match the format '...'",
        "total: 5 quarantined line(s) in 1 file(s)",
    ]
    listed = pd.read_csv(out_csv)
    assert list(listed.columns) == ["file", "line", "ts", "reason", "raw"]
    assert list(listed["line"]) == [3, 7, 8, 9, 11]


# --------------------------------------------------------------------------------------------
# status channels (issue 10, item 3)

STATUS_STATES = ('[loggers.columns.states]\nOK = "running"\n"GRID FAULT" = "stopped by the grid"\n'
                 '"7" = "stopped by a fault"\n')


def status_case(tmp_path, body, filename="log.csv"):
    columns = (("P", "ac_power", "kW", "INV1"), ("G", "poa", "W/m2", None),
               ("S", "status", "code", "INV1"))
    return write_case(tmp_path, body, filename=filename,
                      loggers=logger_toml(columns=columns) + STATUS_STATES)


def test_status_codes_stored_as_written_and_named_by_the_site_file(tmp_path):
    # Invented export: text codes, an integer code with spaces, an empty field, and a code
    # the site file does not map. Every line loads; the codes are kept as written.
    body = ("ts,P,G,S\n2024-06-01 10:00,1.5,500,OK\n2024-06-01 10:05,0,600,GRID FAULT\n"
            "2024-06-01 10:10,0,600, 7 \n2024-06-01 10:15,1.2,600,\n"
            "2024-06-01 10:20,1.1,600,E42\n")
    site_path, log = status_case(tmp_path, body)
    site = load_site(site_path)
    assert site.loggers[0].columns[2].states == (
        ("OK", "running"), ("GRID FAULT", "stopped by the grid"), ("7", "stopped by a fault"))
    con = db.connect(tmp_path / "site.duckdb")
    (res,) = ingest_files(con, site, [log])
    assert (res.rows_read, res.rows_loaded, res.rows_quarantined) == (5, 5, 0)
    rep = status.reported(con, site)
    assert rep["state"].tolist() == ["running", "stopped by the grid", "stopped by a fault",
                                     "code 'E42' (not in the site file's states)"]
    assert rep["device"].unique().tolist() == ["INV1"]
    assert list(rep["ts"]) == [utc(2024, 6, 1, 10, m) for m in (0, 5, 10, 20)]
    # a status code is not a measurement: the quality stage leaves it alone
    quality.run(con, site)
    assert con.execute("SELECT count(*) FROM flags WHERE quantity = 'status_code'"
                       ).fetchall() == [(0,)]
    # an overlapping export repeats the codes: duplicates, and a changed code is a conflict
    again = tmp_path / "log2.csv"
    again.write_text("ts,P,G,S\n2024-06-01 10:00,1.5,500,OK\n2024-06-01 10:05,0,600,OK\n"
                     "2024-06-01 10:25,1.0,600,OK\n")
    (res2,) = ingest_files(con, site, [again])
    assert (res2.rows_loaded, res2.rows_duplicate, res2.rows_quarantined, res2.conflicts) == (
        1, 1, 1, 1)


def test_status_mapping_errors_name_the_key(tmp_path):
    site_path, _ = status_case(tmp_path, "ts,P,G,S\n2024-06-01 10:00,1.5,500,OK\n")
    text = site_path.read_text()
    site_path.write_text(text.replace('OK = "running"', 'OK = "fine"'))
    with pytest.raises(SiteFileError) as err:
        load_site(site_path)
    assert str(err.value).startswith(
        f"{site_path}: loggers[0].columns[2].states.OK: 'fine' is not one of 'running', "
        "'stopped by the grid', 'stopped by a fault'")
    site_path.write_text(text.replace(STATUS_STATES, ""))
    with pytest.raises(SiteFileError) as err:
        load_site(site_path)
    assert str(err.value) == f"{site_path}: loggers[0].columns[2].states: missing table"


# --------------------------------------------------------------------------------------------
# tall exports and compressed files (issue 10, item 4)

TALL = """\
[[loggers]]
name = "park"
match = "park_*.csv"
interval_min = 5
device_column = "Device"
[loggers.devices]
"WR 1" = "INV1"
"WR 2" = "INV2"
"Meteo" = "site"
[loggers.time]
columns = ["ts"]
kind = "utc"
format = "%Y-%m-%d %H:%M"
[[loggers.columns]]
name = "P"
quantity = "ac_power"
unit = "kW"
[[loggers.columns]]
name = "G"
quantity = "poa"
unit = "W/m2"
"""


def test_tall_export_one_row_per_time_and_device(tmp_path):
    # Invented export: each time has a row per inverter and one for the weather station; one
    # row repeats (a duplicate) and one names a device the site file does not know.
    body = ("ts,Device,P,G\n"
            "2024-06-01 10:00,WR 1,1.5,\n2024-06-01 10:00,WR 2,2.5,\n2024-06-01 10:00,Meteo,,500\n"
            "2024-06-01 10:05,WR 1,1.6,\n2024-06-01 10:05,WR 2,2.6,\n2024-06-01 10:05,Meteo,,510\n"
            "2024-06-01 10:05,WR 1,1.6,\n2024-06-01 10:05,WR 9,3.0,\n")
    con, site, (res,) = ingest(tmp_path, body, filename="park_06.csv", loggers=TALL)
    assert [(c.device, c.when_device) for c in site.loggers[0].columns] == [
        ("INV1", ("WR 1",)), ("INV2", ("WR 2",)), ("site", ("Meteo",))]
    assert (res.rows_read, res.rows_loaded, res.rows_duplicate, res.rows_quarantined) == (
        8, 6, 1, 1)
    # 1.5 kW = 1500 W (SI prefix k = 10^3, BIPM SI Brochure, 9th ed. 2019)
    assert_allclose(series(con, "ac_power_w", "INV1").to_numpy(), [1500.0, 1600.0])
    assert_allclose(series(con, "ac_power_w", "INV2").to_numpy(), [2500.0, 2600.0])
    assert_allclose(series(con, "poa_wm2", "site").to_numpy(), [500.0, 510.0])
    assert con.execute("SELECT line, reason FROM quarantine").fetchall() == [
        (9, "device 'WR 9' is not in the devices of [[loggers]] 'park'")]
    # rows repeated across overlapping exports are recognised by content
    later = tmp_path / "park_06b.csv"
    later.write_text("ts,Device,P,G\n2024-06-01 10:05,WR 1,1.6,\n2024-06-01 10:05,WR 2,2.6,\n"
                     "2024-06-01 10:10,WR 1,1.7,\n2024-06-01 10:10,WR 2,2.7,\n")
    (res2,) = ingest_files(con, site, [later])
    assert (res2.rows_loaded, res2.rows_duplicate, res2.rows_quarantined) == (2, 2, 0)


def test_tall_local_times_of_the_repeated_hour_by_device_or_by_file(tmp_path):
    # Directive 2000/84/EC, art. 2-3: in Europe/Berlin local 02:00-02:59 of 27 October 2024
    # repeats, UTC+2 then UTC+1 (summer time ends at 01:00 UTC). Invented tall exports:
    # written device by device, each device's lines step back on their own; written in time
    # order with WR 2's first-pass values missing, WR 2's one line comes after the file has
    # stepped back, so it is read in the second pass.
    local = TALL.replace('kind = "utc"', 'kind = "local"')
    passes = [utc(2024, 10, 27, 0, 0), utc(2024, 10, 27, 0, 30), utc(2024, 10, 27, 1, 0),
              utc(2024, 10, 27, 1, 30)]
    blocked = "ts,Device,P,G\n" + "".join(
        f"2024-10-27 {t},{dev},{p + k},\n" for dev, p in (("WR 1", 1), ("WR 2", 5))
        for k, t in enumerate(("02:00", "02:30", "02:00", "02:30")))
    (tmp_path / "a").mkdir()
    con, _, (res,) = ingest(tmp_path / "a", blocked, filename="park_10.csv", loggers=local)
    assert (res.rows_loaded, res.rows_quarantined) == (8, 0)
    for inv, p in (("INV1", 1), ("INV2", 5)):
        s = series(con, "ac_power_w", inv)
        assert list(s.index) == passes
        assert_allclose(s.to_numpy(), 1000.0 * (p + np.arange(4)))
    in_time = ("ts,Device,P,G\n2024-10-27 02:00,WR 1,1,\n2024-10-27 02:00,Meteo,,500\n"
               "2024-10-27 02:30,WR 1,2,\n2024-10-27 02:30,Meteo,,510\n"
               "2024-10-27 02:00,WR 1,3,\n2024-10-27 02:00,WR 2,5,\n"
               "2024-10-27 02:00,Meteo,,520\n")
    (tmp_path / "b").mkdir()
    con, _, (res,) = ingest(tmp_path / "b", in_time, filename="park_10.csv", loggers=local)
    assert (res.rows_loaded, res.rows_quarantined) == (7, 0)
    assert list(series(con, "ac_power_w", "INV2").index) == [passes[2]]
    assert list(series(con, "ac_power_w", "INV1").index) == passes[:3]
    assert list(series(con, "poa_wm2", "site").index) == passes[:3]


def test_tall_logger_needs_its_devices(tmp_path):
    site_path, _ = write_case(tmp_path, "x\n", filename="park_06.csv",
                              loggers=TALL.replace('"Meteo" = "site"\n', ""))
    with pytest.raises(SiteFileError) as err:
        load_site(site_path)
    assert str(err.value) == (f"{site_path}: loggers[0].columns[1]: poa needs a device mapped to "
                              "site in devices")


@pytest.mark.parametrize("suffix", [".gz", ".zip"])
def test_compressed_files_read_as_they_are(tmp_path, suffix):
    import gzip
    import hashlib
    import io
    import zipfile

    text = b"ts,P,G\n2024-06-01 10:00,1.5,500\n2024-06-01 10:05,2,600\n"
    if suffix == ".gz":
        data = gzip.compress(text)
    else:
        buf = io.BytesIO()
        with zipfile.ZipFile(buf, "w") as z:
            z.writestr("log.csv", text)
        data = buf.getvalue()
    con, _, (res,) = ingest(tmp_path, data, filename="log.csv" + suffix)
    assert (res.rows_read, res.rows_loaded) == (2, 2)
    assert_allclose(series(con, "ac_power_w").to_numpy(), [1500.0, 2000.0])
    # provenance is the file as it is on disk
    assert con.execute("SELECT sha256, size_bytes FROM source_files").fetchall() == [
        (hashlib.sha256(data).hexdigest(), len(data))]


def test_broken_compressed_file_is_one_line(tmp_path):
    site_path, log = write_case(tmp_path, b"\x1f\x8b not really gzip", filename="log.csv.gz")
    result = run_ingest(site_path, log)
    assert result.exit_code == 2
    assert result.stderr.startswith(f"perfcheck: error: {log}: cannot be decompressed (")


HISTORIAN = TALL.replace('device_column = "Device"\n', 'device_column = "device"\n'
                         'point_column = "point"\nvalue_column = "value"\n').replace(
    'name = "P"', 'name = "Pac"').replace('name = "G"', 'name = "Irr"').replace(
    'columns = ["ts"]', 'columns = ["time"]')


def test_historian_export_one_row_per_time_device_and_point(tmp_path):
    # Invented historian export: one value per row; a point the site file does not map is
    # read and stores nothing; a repeated row is a duplicate.
    body = ("time,device,point,value\n"
            "2024-06-01 10:00,WR 1,Pac,1.5\n2024-06-01 10:00,WR 2,Pac,2.5\n"
            "2024-06-01 10:00,Meteo,Irr,500\n2024-06-01 10:00,WR 1,Temp,45\n"
            "2024-06-01 10:05,WR 1,Pac,1.6\n2024-06-01 10:05,WR 1,Pac,1.6\n")
    con, _, (res,) = ingest(tmp_path, body, filename="park_06.csv", loggers=HISTORIAN)
    assert (res.rows_read, res.rows_loaded, res.rows_duplicate, res.rows_quarantined) == (
        6, 5, 1, 0)
    # 1.5 kW = 1500 W (SI prefix k = 10^3, BIPM SI Brochure, 9th ed. 2019)
    assert_allclose(series(con, "ac_power_w", "INV1").to_numpy(), [1500.0, 1600.0])
    assert_allclose(series(con, "ac_power_w", "INV2").to_numpy(), [2500.0])
    assert_allclose(series(con, "poa_wm2", "site").to_numpy(), [500.0])


def test_historian_needs_point_and_value_columns_together(tmp_path):
    site_path, _ = write_case(tmp_path, "x\n", filename="park_06.csv",
                              loggers=HISTORIAN.replace('value_column = "value"\n', ""))
    with pytest.raises(SiteFileError) as err:
        load_site(site_path)
    assert str(err.value) == (f"{site_path}: loggers[0].value_column: give point_column and "
                              "value_column together (a historian export: one row per time, "
                              "device and point)")


def test_full_disk_is_one_line_and_keeps_what_was_stored(tmp_path, monkeypatch):
    # A full disk surfaced as DuckDB's raw exception and a traceback; it is an input the user
    # can fix (free space), so it gets the one-line error and exit code 2 (common practice).
    import duckdb

    import perfcheck.ingest

    site, log = write_case(tmp_path, "ts,P,G\n2024-06-01 10:00,500,600\n")
    assert run_ingest(site, log).exit_code == 0

    def no_space(*args, **kwargs):
        raise duckdb.IOException('Could not write file "x.duckdb.wal": No space left on device')

    monkeypatch.setattr(perfcheck.ingest, "ingest_files", no_space)
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == ("perfcheck: error: no space left on the disk; the write in "
                             "progress was rolled back. Free some space and run the command "
                             "again\n")
    con = db.connect(site.with_suffix(".duckdb"), read_only=True)
    try:
        assert con.execute("SELECT count(*) FROM readings").fetchone()[0] > 0
    finally:
        con.close()
