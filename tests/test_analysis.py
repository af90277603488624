"""One analysis of the whole history, stored once; every view reads it and every number
reconciles (invented demo plant, synthetic truth in ``demo_logs/truth.json``).

The checks are consistency rules of our own design (common practice for a ledger: the parts
add up to the whole on every window), plus the demo truth where it applies (the clock-fault
window has no downtime).
"""

from __future__ import annotations

import json
import math
import re
import shutil
import subprocess
import zipfile
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from perfcheck import analysis, db, detect, evidence, ingest, metrics, monthly, periods, pipeline
from perfcheck import report as report_mod
from perfcheck.cli import main
from perfcheck.scenario import demo_dir
from perfcheck.site import load_site

KWH = 0.1  # JSON keeps 7 significant digits: 0.1 kWh on the demo's totals


def _strip(doc: dict) -> dict:
    """The document without what differs between two runs of the same view (the run record)."""
    return {k: v for k, v in doc.items() if k != "run"}


@pytest.fixture(scope="module")
def plant(tmp_path_factory):
    """The demo copied with an (empty) inbox for the monthly job, ingested and analysed."""
    root = tmp_path_factory.mktemp("plant")
    src = demo_dir()
    (root / "incoming").mkdir()
    text = (src / "site.toml").read_text(encoding="utf-8")
    text = text.replace("[site]\n", "[site]\ninbox = \"incoming/*.csv\"\n", 1)
    (root / "site.toml").write_text(text, encoding="utf-8")
    site = load_site(root / "site.toml")
    path = root / "site.duckdb"
    con = db.connect(path)
    try:
        pipeline.update(con, site, ingest.logger_files(site, src))
        start, end = metrics.resolve_period(con, site, None, None)
        whole = pipeline.view(con, site, start, end)
    finally:
        con.close()
    return root, site, path, whole


def _months(whole: dict) -> list[str]:
    return [m["month"] for m in whole["metrics"]["monthly"]]


def test_every_month_is_the_same_whichever_command_asks(plant, tmp_path):
    """check, monthly, report and an evidence bundle of each month give one document, and it
    is the whole history clipped to the month."""
    root, site, path, whole = plant
    months = _months(whole)
    assert len(months) == 24
    runner = CliRunner()
    per_event: dict[tuple, float] = {}
    for month in months:
        start, end = periods.month_period(site, month)
        out = tmp_path / month
        out.mkdir()
        last_day = (end.tz_convert(site.tz) - pd.Timedelta(days=1)).strftime("%Y-%m-%d")
        r = runner.invoke(main, ["check", str(root / "site.toml"), "--db", str(path),
                                 "--from", f"{month}-01", "--to", last_day,
                                 "--json", str(out / "check.json")])
        assert r.exit_code == 0, r.output
        docs = {"check": json.loads((out / "check.json").read_text())}
        con = db.connect(path)
        try:
            report_mod.write_report(con, site, start, end, out / "report")
            evidence.build_bundle(con, site, start, end, out / "claim.zip", "test")
        finally:
            con.close()
        docs["report"] = json.loads((out / "report" / "check.json").read_text())
        with zipfile.ZipFile(out / "claim.zip") as z:
            docs["evidence"] = json.loads(z.read("results/check.json"))
        job = monthly.run_monthly(site, path, month=month, out_root=out / "monthly")
        docs["monthly"] = json.loads((job.out_dir / "check.json").read_text())
        first = _strip(docs["check"])
        for name, doc in docs.items():
            assert _strip(doc) == first, (month, name)
        for e in first["events"]:
            key = (e["kind"], e["scope"], e["found_start"], e["found_end"])
            per_event[key] = per_event.get(key, 0.0) + e["energy_loss_kwh"]
            assert e["start"] >= first["period"]["start"] and e["end"] <= first["period"]["end"]
    # the months' clipped events add up to the whole history's events
    for e in whole["events"]:
        key = (e["kind"], e["scope"], e["found_start"], e["found_end"])
        assert per_event[key] == pytest.approx(e["energy_loss_kwh"], abs=KWH), key
    assert len(per_event) == len(whole["events"])


def _pdf_text(path: Path) -> str | None:
    if shutil.which("pdftotext") is None:
        return None
    return subprocess.run(["pdftotext", "-layout", str(path), "-"], check=True,
                          capture_output=True, text=True).stdout


def _losses_table(text: str) -> dict[str, float]:
    """The rows of the 'Where the expected energy went' table, label -> kWh."""
    out = {}
    for label, kwh in re.findall(r"<tr><td>([^<]+)</td><td>(-?[\d,]+\.\d)</td></tr>", text):
        out[label] = float(kwh.replace(",", ""))
    return out


def test_one_report_reconciles(plant, tmp_path):
    """shortfall = expected - measured = sum by cause + unexplained; each cause = the sum of
    its events in the window; the months add up to the period; in check.json, events.csv,
    the HTML and the PDF."""
    root, site, path, _ = plant
    con = db.connect(path)
    try:
        start, end = metrics.resolve_period(con, site, None, None)
        paths = report_mod.write_report(con, site, start, end, tmp_path / "r")
        series = analysis.series(con, site, start, end)
    finally:
        con.close()
    doc = json.loads(paths["json"].read_text())
    losses = doc["losses"]
    # the clipping-and-curtailment-by-hour figure sums these ledger columns
    assert series["clipping_wh"].sum() / 1000 == \
        pytest.approx(losses["design_kwh"].get("design_clipping", 0.0), abs=KWH)
    assert series["curtailment_wh"].sum() / 1000 == \
        pytest.approx(losses["by_cause_kwh"].get("curtailment", 0.0), abs=KWH)
    short = losses["expected_kwh"] - losses["measured_kwh"]
    assert math.fsum(losses["by_cause_kwh"].values()) + losses["unexplained_kwh"] == \
        pytest.approx(short, abs=KWH)
    by_kind: dict[str, float] = {}
    for e in doc["events"]:
        by_kind[e["kind"]] = by_kind.get(e["kind"], 0.0) + e["energy_loss_kwh"]
    for kind, kwh in losses["by_cause_kwh"].items():
        assert by_kind[kind] == pytest.approx(kwh, abs=KWH), kind
    for kind, kwh in losses["design_kwh"].items():
        assert by_kind[kind] == pytest.approx(kwh, abs=KWH), kind
    period = doc["metrics"]["period"]
    assert period["measured_kwh"] == pytest.approx(losses["measured_kwh"], abs=KWH)
    assert period["expected_kwh"] == pytest.approx(losses["expected_kwh"], abs=KWH)
    for key in ("measured_kwh", "expected_kwh"):
        assert math.fsum(m[key] for m in doc["metrics"]["monthly"]) == \
            pytest.approx(period[key], abs=KWH * 24)
    csv_rows = pd.read_csv(paths["events_csv"])
    for kind, kwh in losses["by_cause_kwh"].items():
        assert csv_rows.loc[csv_rows["kind"] == kind, "energy_loss_kwh"].sum() == \
            pytest.approx(kwh, abs=KWH)
    html = paths["html"].read_text(encoding="utf-8")
    table = _losses_table(html[html.index('id="losses"'):])
    rows = list(table.values())
    expected, measured = rows[0], table["Measured"]
    causes = [v for k, v in table.items() if k.startswith("less ")]
    assert expected - math.fsum(causes) == pytest.approx(measured, abs=0.05 * (len(causes) + 2))
    assert expected == pytest.approx(losses["expected_kwh"], abs=0.05)
    # the demo has an export meter: from the measured energy on to the delivered energy
    at_meter = [v for k, v in table.items() if k.startswith(("AC losses", "Inverter energy"))]
    gaps = [v for k, v in table.items() if k.startswith("Metered where")]
    assert measured - math.fsum(at_meter) + math.fsum(gaps) == pytest.approx(
        table["Delivered at the export meter"], abs=0.05 * (len(at_meter) + len(gaps) + 2))
    assert table["Delivered at the export meter"] == pytest.approx(
        losses["meter"]["delivered_kwh"], abs=0.05)
    assert 'id="meter"' in html and "Basis of the plant's figures" in html
    assert f"{losses['measured_kwh']:,.0f} kWh" in html  # the headline's measured energy
    text = _pdf_text(paths["pdf"])
    if text is None:
        pytest.skip("pdftotext (poppler-utils) not installed: PDF text not checked")
    for label, kwh in table.items():
        assert f"{kwh:,.1f}" in text, label


def test_clock_fault_is_no_downtime(plant):
    """Demo truth: during the clock-fault window the plant ran; every inverter is fully
    available and no outage is found."""
    root, site, path, whole = plant
    truth = json.loads((demo_dir() / "truth.json").read_text(encoding="utf-8"))
    (f,) = [f for f in truth["faults"] if f["kind"] == "clock_fault"]
    con = db.connect(path)
    try:
        start, end = pd.Timestamp(f["start"]).tz_convert("UTC"), \
            pd.Timestamp(f["end"]).tz_convert("UTC")
        doc = analysis.view(con, site, start, end)
    finally:
        con.close()
    assert [e for e in doc["events"] if e["kind"] in ("outage", "partial_outage")] == []
    p = doc["metrics"]["period"]
    assert p["availability"] == 1.0
    assert all(i["availability"] == 1.0 for i in p["inverters"])


def test_views_of_a_stored_analysis_run_no_detector(plant, tmp_path, monkeypatch):
    root, site, path, _ = plant

    def refuse(*args, **kwargs):
        raise AssertionError("a view ran a detector")

    monkeypatch.setattr(detect, "analyse", refuse)
    start, end = periods.month_period(site, "2025-06")
    con = db.connect(path)
    try:
        report_mod.write_report(con, site, start, end, tmp_path / "r")
        evidence.build_bundle(con, site, start, end, tmp_path / "claim.zip", "test")
        doc = analysis.view(con, site, start, end)
    finally:
        con.close()
    assert doc["events"]


def test_new_month_updates_the_analysis_and_records_revisions(tmp_path):
    """23 months, then the 24th: the analysis is made again, degradation (two years needed)
    is found over the earlier months too, and that revision is recorded and shown; every
    other earlier finding that changed is in the record."""
    src = demo_dir()
    site = load_site(src / "site.toml")
    files = ingest.logger_files(site, src)
    last = [p for p in files if "2026-04" in p.name]
    assert len(last) == 2
    path = tmp_path / "site.duckdb"
    con = db.connect(path)
    try:
        pipeline.update(con, site, [p for p in files if p not in last])
        first = analysis.current(con)
        again = analysis.update(con, site)
        assert again == first  # nothing changed: nothing re-analysed
        before = con.execute(db.sql("analysis_events_before"),
                             {"id": first.id, "before": first.end_ts}).df()
        before["start_ts"] = pd.to_datetime(before["start_ts"], utc=True)
        pipeline.update(con, site, last)
        second = analysis.current(con)
        assert second.id != first.id and second.end_ts > first.end_ts
        start, end = periods.month_period(site, "2025-06")
        doc = analysis.view(con, site, start, end, second)
        paths = report_mod.write_report(con, site, start, end, tmp_path / "r")
        revised = con.execute("SELECT change, kind, scope, before_start, after_start FROM "
                              "analysis_revisions WHERE analysis_id = ?", [second.id]).fetchall()
        after = con.execute(db.sql("analysis_events_before"),
                            {"id": second.id, "before": first.end_ts}).df()
    finally:
        con.close()
    assert not (before["kind"] == "degradation").any()
    found = [r for r in doc["revisions"] if r["kind"] == "degradation"]
    assert found and found[0]["change"] == "found earlier"
    assert "new logger file" in found[0]["reason"]
    assert "Revised findings" in paths["html"].read_text(encoding="utf-8")
    # every earlier finding either stands (same kind, scope and start, energy within the
    # revision threshold) or its change is on record
    recorded = {(k, sc) for _, k, sc, _, _ in revised}
    for r in before.itertuples():
        if (r.kind, r.scope) in recorded:
            continue
        same = after[(after["kind"] == r.kind) & (after["scope"] == r.scope)
                     & (pd.to_datetime(after["start_ts"], utc=True) == r.start_ts)]
        assert len(same) == 1, r
        limit = max(analysis.REVISION_MIN_KWH, analysis.REVISION_SHARE * abs(r.energy_kwh))
        assert abs(same["energy_kwh"].iloc[0] - r.energy_kwh) <= limit, r


def test_quarantined_lines_shown_in_the_report_and_the_bundle(plant, tmp_path):
    """Issue 10, item 7: the lines that could not be read are visible. Demo truth: the
    generator wrote 14 corrupt lines (``corrupt_rows`` in truth.json), two of them in the
    inverter file of January 2025."""
    root, site, path, _ = plant
    truth = json.loads((demo_dir() / "truth.json").read_text(encoding="utf-8"))
    (corrupt,) = [f for f in truth["faults"] if f["kind"] == "corrupt_rows"]
    corrupt = corrupt["parameters"]["rows"]
    start, end = periods.month_period(site, "2025-01")
    con = db.connect(path)
    try:
        paths = report_mod.write_report(con, site, start, end, tmp_path / "r")
        evidence.build_bundle(con, site, start, end, tmp_path / "claim.zip", "test")
    finally:
        con.close()
    html = paths["html"].read_text(encoding="utf-8")
    table = html[html.index('id="quarantine"'):html.index("</table>", html.index(
        'id="quarantine"'))]
    month = [r for r in corrupt if r["file"] == "talbrunn_fl3_2025-01.csv"]
    assert table.count("talbrunn_fl3_2025-01.csv") == len(month) == 2
    with zipfile.ZipFile(tmp_path / "claim.zip") as z:
        rows = pd.read_csv(z.open("results/quarantine.csv"))
    assert len(rows) == len(corrupt) == 14
    assert sorted(rows["line"]) == sorted(r["line"] for r in corrupt)
    assert list(rows.columns) == ["file", "line", "ts", "reason", "raw"]
    assert all(f.startswith("raw/") for f in rows["file"])
