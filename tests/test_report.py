"""The report: files written, content in the reader's order, no network references, CSV."""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from report_fixtures import checked, example_aligned, example_check, rendered_example, write_site

from perfcheck import figures, periods, report
from perfcheck.cli import main
from perfcheck.errors import SiteFileError
from perfcheck.site import load_site


@pytest.fixture(scope="module")
def written(tmp_path_factory) -> tuple[object, dict[str, Path]]:
    return rendered_example(tmp_path_factory.mktemp("report"))


def test_all_outputs_written(written):
    _, paths = written
    for key in ("html", "pdf", "json", "events_csv", "monthly_csv"):
        assert paths[key].stat().st_size > 0, key
    assert paths["pdf"].read_bytes()[:5] == b"%PDF-"
    stems = [s for s, _, _ in figures.FIGURES]
    assert len(stems) == 8
    for stem in stems:
        assert paths[f"figure_{stem}"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_html_is_self_contained(written):
    html = written[1]["html"].read_text(encoding="utf-8")
    assert "Content-Security-Policy" in html and "default-src 'none'" in html
    # no reference that could reach a network: every src/href is a data: URI or a fragment
    refs = re.findall(r'(?:src|href)\s*=\s*"([^"]*)"', html)
    assert refs and all(r.startswith(("data:", "#")) for r in refs), refs
    assert not re.search(r"<script|<link|@import|url\(", html)
    assert html.count('src="data:image/png;base64,') == 8


def test_sections_in_reader_order(written):
    html = written[1]["html"].read_text(encoding="utf-8")
    marks = ['id="verdict"', 'id="coverage"', 'id="monthly"', 'id="figures"', 'id="events"',
             'id="guarantees"', 'id="methods"', 'id="cautions"']
    pos = [html.index(m) for m in marks]
    assert pos == sorted(pos)
    figs = [html.index(f'id="fig-{s}"') for s, _, _ in figures.FIGURES]
    assert figs == sorted(figs)
    for text in ("DC arcs do not extinguish by themselves", "qualified persons",
                 "Confirm each one on site", "evidence, not legal advice"):
        assert text in html, text


def test_verdict_sentence_numbers():
    # numbers of the invented check result: 14 200 kWh expected, EPI 0.944 -> 13 405 kWh,
    # shortfall 795 kWh = 5.6 %; top cause the partial outage on INV2 (412 kWh, 360-470)
    text = report.verdict(example_check(), "Europe/Zurich")
    assert text == ("In June 2025 the plant delivered 13,405 kWh, 5.6% (795 kWh) less than "
                    "expected: EPI 0.944 (0.934–0.954), PR 0.781 (0.769–0.793), "
                    "temperature-corrected PR 0.811 (0.798–0.824); the largest cause found is "
                    "partial outage on inverter INV2 (412 kWh, 360–470).")


def test_verdict_without_enough_data():
    r = example_check()
    r["metrics"]["period"].update(epi=None, coverage=0.42)
    assert report.verdict(r, "Europe/Zurich") == (
        "June 2025: too little valid data for a verdict (data coverage 42%); see data "
        "coverage below.")


def test_event_paragraph_plain_words():
    ev = example_check()["events"][0]
    text = report.event_paragraph(ev, "Europe/Zurich")
    assert text.startswith("From 2025-06-13 00:00 to 2025-06-19 00:00 inverter INV2 lost about "
                           "412 kWh, 360–470.")
    assert "We think it is partial outage because" in text
    assert "On site, check string currents" in text


def test_event_paragraph_says_what_the_inverter_reported():
    # issue 10, item 3: a trip the inverter itself explains is said in its words
    ev = {**example_check()["events"][0], "kind": "outage",
          "reported_state": "stopped by the grid"}
    text = report.event_paragraph(ev, "Europe/Zurich")
    assert text.startswith("From 2025-06-13 00:00 to 2025-06-19 00:00 inverter INV2 lost about "
                           "412 kWh, 360–470. Meanwhile the inverter reported: stopped by the "
                           "grid. We think it is outage because")
    assert "reported state" not in text


def test_events_csv_stable_columns(written):
    rows = list(csv.DictReader(io.StringIO(written[1]["events_csv"].read_text())))
    assert list(rows[0]) == report.EVENT_FIELDS
    assert rows[0]["kind"] == "partial_outage" and rows[0]["duration_h"] == "144.0"


def test_report_settings_key_errors(tmp_path):
    site = write_site(tmp_path, "[report]\ncritical_kinds = [\"fire\"]\n")
    with pytest.raises(SiteFileError, match=r"report.critical_kinds: 'fire' is not an event"):
        report.report_settings(site)
    site = write_site(tmp_path, "[report]\nunderperformance_threshold_pct = -1\n")
    with pytest.raises(SiteFileError, match="report.underperformance_threshold_pct: -1.0 is "
                       "outside the range 0 to 100"):
        report.report_settings(site)


def test_cli_refuses_conflicting_periods(tmp_path):
    write_site(tmp_path)
    r = CliRunner().invoke(main, ["report", str(tmp_path / "site.toml"), "--month", "2025-06",
                                  "--from", "2025-06-01", "--to", "2025-06-30", "--out",
                                  str(tmp_path / "o")])
    assert r.exit_code == 2
    assert r.output.strip() == ("perfcheck: error: give either --month or --from/--to, "
                                "not both")


def test_cli_bad_month(tmp_path):
    write_site(tmp_path)
    r = CliRunner().invoke(main, ["report", str(tmp_path / "site.toml"), "--month", "June",
                                  "--out", str(tmp_path / "o")])
    assert r.exit_code == 2
    assert r.output.strip() == "perfcheck: error: --month: 'June' is not a month like 2025-06"


@pytest.mark.slow
def test_demo_month_report(demo_db, tmp_path):
    """The report on a month of the invented demo plant, every stage real."""
    site = demo_db.site
    start, end = periods.month_period(site, "2025-06")
    con = demo_db.connect()
    try:
        paths = report.write_report(con, site, start, end, tmp_path / "out")
    finally:
        con.close()
    html = paths["html"].read_text(encoding="utf-8")
    assert html.count('src="data:image/png;base64,') == len(figures.FIGURES)
    doc = json.loads(paths["json"].read_text())
    p = doc["metrics"]["period"]
    # the verdict quotes the period's numbers as the JSON holds them
    assert f"EPI {p['epi']:.3f}" in html and f"{p['measured_kwh']:,.0f} kWh" in html
    rows = list(csv.DictReader(io.StringIO(paths["events_csv"].read_text())))
    assert [(r["kind"], r["scope"]) for r in rows] == [(e["kind"], e["scope"])
                                                       for e in doc["events"]]


def test_age_note_in_methods_and_header(tmp_path):
    # issue 10, item 6: without a commissioning date the report says where ageing starts
    site = write_site(tmp_path)
    site.path.write_text(site.path.read_text().replace("commissioned = 2024-04-01\n", ""))
    site = load_site(site.path)
    result = checked(site.aged(dt.date(2025, 6, 1)), example_check())
    result["settings"].update(site.aged(dt.date(2025, 6, 1)).age_record())
    ctx = report.context(site, result, example_aligned(), {"files": [], "flags": []})
    note = ("Note: no commissioning date in the site file: the age allowance starts at the "
            "first data (2025-06-01); if the modules are older, give site.commissioned or "
            "site.module_age_years_at_first_data.")
    assert ("para", note) in report.pdf_text_blocks(ctx)
    assert "notes" not in ctx["settings"]
    html = report.render_html(ctx, {stem: b"" for stem, _, _ in figures.FIGURES})
    assert note in html and "commissioning date not given" in html
