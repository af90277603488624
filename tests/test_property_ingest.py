"""Property of the ingest (issue 10, item 9): a logger file written in any mix of the habits
the ingest supports gives either a one-line refusal (``LoggerFileError``, exit 2 from the CLI)
or a load whose accounting balances and whose stored values are the generator's, converted to
SI units.

The generator writes invented exports: wide, tall (a row per time and device) and historian
files (a row per time, device and point); delimiter ``,`` ``;`` tab ``|``; decimal point or
comma; a preamble; a units row (sometimes one that contradicts the site file: then the file
must be refused); ISO times with an offset, naive UTC, naive site-local (over daylight-saving
changes) and epoch seconds, in one column or a date and a time column, labelling the start or
the end of the interval, in four zones; W or kW, C or K; sentinels and empty fields; garbage
lines; a repeated line; a last line cut short; a byte-order mark; CRLF line ends. The truth it
states is its own: each value it wrote, at the instant it meant.

``PERFCHECK_FUZZ_EXAMPLES`` sets the number of examples (default 300, about two minutes on a
shared two-core machine; 10000 for the long run of issue 10).
"""

from __future__ import annotations

import math
import os
import tempfile
from pathlib import Path

import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from logger_files import SITE

from perfcheck import db
from perfcheck.errors import LoggerFileError
from perfcheck.ingest import UNIT_TO_SI, ingest_files
from perfcheck.site import load_site

EXAMPLES = int(os.environ.get("PERFCHECK_FUZZ_EXAMPLES", "300"))

# UTC instants the series start at: an ordinary day, the spring and autumn changes of
# Europe/Berlin (2024-03-31 01:00 UTC, 2024-10-27 01:00 UTC) and America/New_York
# (2024-11-03 06:00 UTC), New Year. The autumn starts lie in the first pass of the repeated
# hour, so that a naive local file tells the two passes apart by the order of its lines.
STARTS = ("2024-06-01 10:00", "2024-03-31 00:30", "2024-10-27 00:15", "2024-11-03 05:30",
          "2023-12-31 23:00")
ZONES = ("Europe/Berlin", "America/New_York", "Asia/Kolkata", "UTC")
GARBAGE = ("Total", "end of export", "ERROR 42: sensor bus", "#;#;#", '"unclosed, quote',
           "Summe,,,,", "x\ty\tz", "---", "Datum|Zeit")
PREAMBLE = st.text(st.sampled_from('abcXYZ 0123:;,|"#=-_.äµ\t'), min_size=1, max_size=30).filter(
    lambda s: s.strip() != "")
# (name in the file, quantity, stored name, device in a wide file)
POWER, IRR, TEMP = ("P AC", "ac_power", "ac_power_w"), ("Einstrahlung", "poa", "poa_wm2"), (
    "Température", "temp_module", "temp_module_c")
DEVICES = (("WR 1", "INV1"), ("WR 2", "INV2"), ("Met", "site"))
UNIT_TEXT = {"W": "[W]", "kW": "kW", "W/m2": "W/m²", "C": "°C", "K": "(K)"}


def _number(draw, lo: int, hi: int, decimal: str) -> str:
    v = draw(st.integers(lo, hi)) / draw(st.sampled_from([1, 10, 1000]))
    text = repr(v) if draw(st.booleans()) else f"{v:g}"
    return text.replace(".", ",") if decimal == "," else text


def _value(draw, lo: int, hi: int, decimal: str, sentinels: tuple[str, ...]) -> str:
    """A value as written: a number, or (missing) an empty field or a sentinel."""
    kind = draw(st.sampled_from(["n", "n", "n", "n", "empty", "sentinel"]))
    if kind == "empty":
        return ""
    if kind == "sentinel" and sentinels:
        return draw(st.sampled_from(sentinels))
    return _number(draw, lo, hi, decimal)


def _time_fields(t: pd.Timestamp, kind: str, zone: str, split: bool) -> list[str]:
    if kind == "iso":
        return [t.tz_convert(zone).isoformat()]
    if kind == "epoch":
        return [str(int(t.timestamp()))]
    wall = t.tz_convert("UTC" if kind == "utc" else zone)
    return [wall.strftime("%d.%m.%Y"), wall.strftime("%H:%M")] if split else [
        wall.strftime("%Y-%m-%d %H:%M")]


def _toml(s: str | list) -> str:
    if isinstance(s, list):
        return "[" + ", ".join(_toml(x) for x in s) + "]"
    return '"' + s.replace("\\", "\\\\").replace('"', '\\"').replace("\t", "\\t") + '"'


@st.composite
def exports(draw):
    """(site TOML, file bytes, truth, expect): truth maps (UTC instant, stored quantity, device)
    to the SI value; expect is 'load' or 'refuse' (a units row contradicting the site file),
    with the counts of data lines and of lines that must be quarantined."""
    layout = draw(st.sampled_from(["wide", "tall", "historian"]))
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    decimal = "," if delimiter != "," and draw(st.booleans()) else "."
    zone = draw(st.sampled_from(ZONES))
    kind = draw(st.sampled_from(["iso", "utc", "local", "epoch"]))
    split = kind in ("utc", "local") and draw(st.booleans())
    label = draw(st.sampled_from(["start", "end"]))
    interval = draw(st.sampled_from([1, 5, 15]))
    p_unit, t_unit = draw(st.sampled_from(["W", "kW"])), draw(st.sampled_from(["C", "K"]))
    sentinels = draw(st.sampled_from([(), ("-9999",), ("#N/A", "-9999")]))
    units_row = layout != "historian" and draw(st.booleans())
    wrong_unit = units_row and draw(st.integers(0, 9)) == 0
    preamble = draw(st.lists(PREAMBLE, max_size=3))
    start = pd.Timestamp(draw(st.sampled_from(STARTS)), tz="UTC")
    n = draw(st.integers(1, 10))

    time_cols = ["Datum", "Zeit"] if split else ["Zeitstempel"]
    fmt = "%d.%m.%Y %H:%M" if split else "%Y-%m-%d %H:%M"
    units = {POWER[0]: p_unit, IRR[0]: "W/m2", TEMP[0]: t_unit}
    shift = pd.Timedelta(minutes=interval if label == "end" else 0)
    truth: dict[tuple[pd.Timestamp, str, str], float] = {}
    lines: list[tuple[str, set]] = []  # each data line with the truth keys it writes

    def record(t: pd.Timestamp, col: tuple[str, str, str], device: str, text: str) -> set:
        if text == "" or text in sentinels:
            return set()
        factor, offset = UNIT_TO_SI[units[col[0]]]
        key = (t - shift, col[2], device)
        truth[key] = float(text.replace(",", ".")) * factor + offset
        return {key}

    def row(fields: list[str], keys: set) -> None:
        lines.append((delimiter.join(fields), keys))

    for i in range(n):
        t = start + pd.Timedelta(minutes=interval * (i + (label == "end")))
        times = _time_fields(t, kind, zone, split)
        p = [_value(draw, 0, 12000, decimal, sentinels) for _ in range(2)]
        g, temp = (_value(draw, 0, 1300, decimal, sentinels),
                   _value(draw, 250, 350, decimal, sentinels))
        if layout == "wide":
            row([*times, p[0], g, temp], record(t, POWER, "INV1", p[0])
                | record(t, IRR, "site", g) | record(t, TEMP, "site", temp))
        elif layout == "tall":
            row([*times, "WR 1", p[0], "", ""], record(t, POWER, "INV1", p[0]))
            row([*times, "WR 2", p[1], "", ""], record(t, POWER, "INV2", p[1]))
            row([*times, "Met", "", g, temp], record(t, IRR, "site", g)
                | record(t, TEMP, "site", temp))
        else:
            for (dev, target), col, text in ((DEVICES[0], POWER, p[0]), (DEVICES[1], POWER, p[1]),
                                              (DEVICES[2], IRR, g), (DEVICES[2], TEMP, temp)):
                if text != "":  # a historian writes no row for a missing value
                    row([*times, dev, col[0], text], record(t, col, target, text))

    header = time_cols + {"wide": [POWER[0], IRR[0], TEMP[0]],
                          "tall": ["Gerät", POWER[0], IRR[0], TEMP[0]],
                          "historian": ["Gerät", "Punkt", "Wert"]}[layout]
    if lines and draw(st.booleans()):  # an overlapping export repeats a line (next to it:
        # a naive local time out of order would move to the other pass of a repeated hour)
        at = draw(st.integers(0, len(lines) - 1))
        lines.insert(at + 1, lines[at])
    garbage = draw(st.lists(st.sampled_from(GARBAGE), max_size=3))
    for text in garbage:
        lines.insert(draw(st.integers(0, len(lines))), (text, None))  # None: quarantined
    cut = bool(lines) and lines[-1][1] is not None and draw(st.booleans())
    if cut:  # the file is still being written: its last line ends before its last field
        last = lines[-1][0]
        lines[-1] = (last[:draw(st.integers(1, last.rindex(delimiter)))], None)
        kept = set().union(*(k for _, k in lines if k is not None))
        truth = {k: v for k, v in truth.items() if k in kept}
    quarantined = sum(1 for text, k in lines if k is None and text.strip())
    data_lines = sum(1 for text, _ in lines if text.strip())
    head = [*preamble, delimiter.join(header)]
    if units_row:
        head.append(delimiter.join(
            ["" for _ in time_cols] + ([""] if layout == "tall" else [])
            + [UNIT_TEXT["W" if u == "kW" else "kW"] if wrong_unit and name == POWER[0]
               else UNIT_TEXT[u] for name, u in units.items()]))
    eol = "\r\n" if draw(st.booleans()) else "\n"
    end = "" if cut or not draw(st.booleans()) else eol
    text = eol.join(head + [line for line, _ in lines]) + end
    body = ("\ufeff" if draw(st.booleans()) else "") + text

    columns = [(POWER, p_unit, "INV1"), (IRR, "W/m2", None), (TEMP, t_unit, None)]
    toml = ["[[loggers]]", 'name = "fuzz"', 'match = "*.csv"', f"interval_min = {interval}",
            f"delimiter = {_toml(delimiter)}", f"decimal = {_toml(decimal)}",
            f"preamble_lines = {len(preamble)}", f"units_row = {str(units_row).lower()}",
            f"sentinels = {_toml(list(sentinels))}"]
    if layout != "wide":
        toml.append('device_column = "Gerät"')
    if layout == "historian":
        toml += ['point_column = "Punkt"', 'value_column = "Wert"']
    if layout != "wide":
        toml += ["[loggers.devices]"] + [f"{_toml(d)} = {_toml(t)}" for d, t in DEVICES]
    toml += ["[loggers.time]", f"columns = {_toml(time_cols)}", f'kind = "{kind}"',
             f'label = "{label}"'] + ([f"format = {_toml(fmt)}"] if kind in ("utc", "local")
                                     else [])
    for (name, quantity, _), unit, inverter in columns:
        toml += ["[[loggers.columns]]", f"name = {_toml(name)}", f'quantity = "{quantity}"',
                 f'unit = "{unit}"']
        if inverter and layout == "wide":
            toml.append(f'inverter = "{inverter}"')
    site = SITE.format(timezone=zone) + "\n" + "\n".join(toml) + "\n"
    expect = "refuse" if wrong_unit else "load"
    return site, body.encode("utf-8"), truth, expect, data_lines, quarantined


def _load(tmp: Path, site_text: str, body: bytes):
    (tmp / "site.toml").write_text(site_text, encoding="utf-8")
    log = tmp / "export.csv"
    log.write_bytes(body)
    site = load_site(tmp / "site.toml")
    con = db.connect(tmp / "site.duckdb")
    try:
        (res,) = ingest_files(con, site, [log])
        stored = con.execute("SELECT ts, quantity, device, value FROM readings").fetchall()
    finally:
        con.close()
    return res, stored


def check_export(case, tmp: Path) -> str:
    """Ingest one generated export in the empty folder ``tmp`` and assert the property;
    returns 'refused' or 'loaded'."""
    site_text, body, truth, expect, data_lines, quarantined = case
    try:
        res, stored = _load(tmp, site_text, body)
    except LoggerFileError as err:
        assert expect == "refuse", str(err)
        assert "\n" not in str(err) and "P AC" in str(err)
        return "refused"
    assert expect == "load"
    assert res.rows_read == data_lines
    assert res.rows_read == res.rows_loaded + res.rows_duplicate + res.rows_quarantined
    assert res.rows_quarantined == quarantined
    got = {(pd.Timestamp(ts).tz_convert("UTC"), q, d): v for ts, q, d, v in stored}
    assert set(got) == set(truth)
    for key, value in truth.items():
        assert math.isclose(got[key], value, rel_tol=1e-12, abs_tol=1e-9), (key, got[key], value)
    return "loaded"


@settings(max_examples=EXAMPLES, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(case=exports())
def test_any_export_is_refused_in_one_line_or_loaded_exactly(tmp_path_factory, case):
    with tempfile.TemporaryDirectory(dir=tmp_path_factory.getbasetemp()) as tmp:
        check_export(case, Path(tmp))
