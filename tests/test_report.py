"""The report: files written, content in the reader's order, no network references, CSV."""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner
from report_fixtures import checked as report_fixtures_checked_with
from report_fixtures import example_aligned, example_check, rendered_example, write_site

from perfcheck import evidence, figures, periods, report
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
    # shortfall 795 kWh = 5.6 %; top cause the partial outage on INV2 (412 kWh, 360-470);
    # coverage 0.99 of the daylight intervals: said, with the share
    text = report.verdict(example_check(), "Europe/Zurich")
    assert text == ("In June 2025 the plant delivered 13,405 kWh, 5.6% (795 kWh) less than "
                    "expected: EPI 0.944 (0.934–0.954), PR 0.781 (0.769–0.793), "
                    "temperature-corrected PR 0.811 (0.798–0.824); the largest cause found is "
                    "partial outage on inverter INV2 (412 kWh, 95 % band 360–470 kWh). Data "
                    "cover 99% of the period's daylight intervals; the numbers hold for that "
                    "share.")


def test_verdict_with_an_export_meter_says_where_pr_is_taken():
    # the invented check result with a meter (IEC 61724-1: PR where the energy is delivered):
    # 13 405 kWh at the inverters, 13 204 kWh at the meter (1.5 % AC losses)
    r = example_check()
    r["metrics"]["period"]["delivered_kwh"] = 13204.0
    r["losses"]["meter"] = {"basis": "meter"}
    text = report.verdict(r, "Europe/Zurich")
    assert text.startswith("In June 2025 the plant's inverters delivered 13,405 kWh, 5.6% "
                           "(795 kWh) less than expected, and 13,204 kWh reached the export "
                           "meter: EPI at the meter 0.944 (0.934–0.954), PR at the meter 0.781")


def test_verdict_of_a_span_reads_as_a_sentence():
    r = example_check("2023-01-01T00:00:00+01:00", "2025-01-01T00:00:00+01:00")
    r["metrics"]["period"]["coverage"] = 1.0
    text = report.verdict(r, "Europe/Zurich")
    assert text.startswith("From 1 January 2023 to 31 December 2024 the plant delivered ")
    assert "Data cover" not in text
    assert report.period_text(r, "Europe/Zurich") == "1 January 2023 to 31 December 2024"


def test_no_data_names_the_feeds_that_stopped():
    r = example_check("2030-01-01T00:00:00+01:00", "2030-02-01T00:00:00+01:00")
    r["metrics"]["period"].update(valid_intervals=0, epi=None, measured_kwh=0.0,
                                  expected_kwh=0.0)
    feeds = [{"quantity": "ac_power_w", "device": "INV1", "readings": 0,
              "last_ts": pd.Timestamp("2026-04-30T21:55:00Z")},
             {"quantity": "poa_wm2", "device": "site", "readings": 0, "last_ts": pd.NaT}]
    assert report.no_data(r)
    assert report.verdict(r, "Europe/Zurich", feeds) == (
        "No data for January 2030: no feed reported: AC power of inverter INV1 (last reading: "
        "2026-04-30 23:55+02:00); plane-of-array irradiance at the site (last reading: never). "
        "No verdict is possible for this period.")
    # never a green zero: every tile says n/a, no shortfall of 0 kWh
    assert report._tiles(r) == [(k, "n/a", "no data") for k in
                                ("EPI", "PR", "PR temp.-corrected", "Shortfall")]


def test_interval_shown_only_when_wider_than_the_rounding():
    rec = {"a": 1.0, "a_ci_low": 0.99996, "a_ci_high": 1.0, "b": 0.5, "b_ci_low": 0.4,
           "b_ci_high": 0.6}
    assert report.fmt_interval(rec, "a", "{:.1%}") == "100.0%"
    assert report.fmt_interval(rec, "b", "{:.1%}") == "50.0% (40.0%–60.0%)"


@pytest.mark.parametrize(("key", "value", "label", "text"), [
    # the raw fields of issue 12, as a person should read them (common practice: three
    # significant digits, kW for power, yes/no, no scientific notation)
    ("limit_w", 5e4, "Limit", "50.0 kW"),
    ("design", True, "Design", "yes"),
    ("attributed_kwh", 1440.0, "Attributed", "1,440 kWh"),
    ("p_value", 4.63e-105, "P-value", "< 0.0001"),
    ("p_value", 0.0, "P-value", "< 0.0001"),  # underflowed: a probability is never 0
    ("exclude_flags", ["out_of_range", "stuck"], "Exclude flags", "out of range, stuck"),
    ("t_cell_typ_avg_c", None, "T cell typical average", "from the data"),
    ("t_cell_typ_avg_used_c", 29.61059, "T cell typical average used", "29.6 °C"),
    ("azimuth_from_deg", 200.0, "Azimuth from", "200°"),
])
def test_plain_values(key, value, label, text):
    assert report.label_unit(key)[0] == label
    assert report.plain_value(key, value, "Europe/Zurich") == text


def test_a_statistic_that_does_not_apply_is_left_out():
    # a step's onset has no standard error (only a drift's has): no row, not "from the data"
    ev = {"kind": "sensor_fault", "evidence": {"shape": "step", "onset_se_days": None,
                                               "p_value": 0.0}}
    assert report.stat_rows(ev, "Europe/Zurich") == [("Shape", "step"), ("P-value", "< 0.0001")]


def test_verdict_without_enough_data():
    r = example_check()
    r["metrics"]["period"].update(epi=None, coverage=0.42)
    assert report.verdict(r, "Europe/Zurich") == (
        "June 2025: too little valid data for a verdict (data coverage 42%); see data "
        "coverage below.")


def test_event_paragraph_plain_words():
    ev = example_check()["events"][0]
    text = report.event_paragraph(ev, "Europe/Zurich")
    assert text.startswith("Partial outage on inverter INV2, from 2025-06-13 00:00+02:00 to "
                           "2025-06-19 00:00+02:00 (end excluded). Energy lost in this period: "
                           "about 412 kWh, 95 % band 360–470 kWh.")
    assert "We think so because the output stepped down" in text
    assert "On site, check string currents" in text
    # the statistics go to the appendix, with labels and units
    assert "p value" not in text and "dc share" not in text
    rows = report.stat_rows(ev, "Europe/Zurich")
    assert ("P-value", "< 0.0001") in rows
    assert ("Strings lost", "3.30") in rows


def test_event_paragraph_says_what_the_inverter_reported():
    # issue 10, item 3: a trip the inverter itself explains is said in its words
    ev = {**example_check()["events"][0], "kind": "outage",
          "reported_state": "stopped by the grid"}
    text = report.event_paragraph(ev, "Europe/Zurich")
    assert text.startswith("Outage on inverter INV2, from 2025-06-13 00:00+02:00 to "
                           "2025-06-19 00:00+02:00 (end excluded). Energy lost in this period: ")
    assert " Meanwhile the inverter reported: stopped by the grid. We think so because " in text


def test_soiling_limit_said_in_words_with_its_unit(written):
    # the limit the analysis stored (invented in the example check: 4.1 % per cycle, daily
    # scale 0.87 %, 341 days, alpha 0.001) is said under the soiling figure, in the HTML and
    # the PDF (test_pdf_carries_every_number_of_the_html checks the numbers)
    page = written[1]["html"].read_text(encoding="utf-8")
    figure = page.split('<figure id="fig-soiling">', 1)[1].split("</figure>", 1)[0]
    assert '<p class="fig-note" id="soiling-note">Soiling losses below 4.10 %' in figure
    html = _visible_text(page)
    assert ("Soiling losses below 4.10 % per cycle (the loss reached by the time a wash ends "
            "it) cannot be told from this plant's day-to-day noise: the daily "
            "measured/expected index scatters by 0.870 % from day to day, and a wash is found "
            "only as a step up of that index") in html
    assert "over the 341 days, false-alarm rate 0.001 in all" in html
    lim = example_check()["losses"]["soiling_detection_limit"]
    rain = report.soiling_limit_text({"soiling_detection_limit": {
        **lim, "washes_known_from_rain": True, "alpha": 1e-5}})
    assert "noise when no rain reading marks the wash" in rain and "rate 0.00001 in all" in rain
    assert "Between the washes the rain readings mark, a smaller decline" in rain
    unknown = report.soiling_limit_text({"soiling_detection_limit": {**lim, "loss_pct": None}})
    assert unknown.startswith("Soiling: too few days")
    assert report.soiling_limit_text({}) == ""


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
    # the verdict quotes the period's numbers as the JSON holds them (the demo's plant figures
    # are at its export meter, and the verdict says so)
    assert f"EPI at the meter {p['epi']:.3f}" in html
    assert f"{p['measured_kwh']:,.0f} kWh" in html and f"{p['delivered_kwh']:,.0f} kWh" in html
    rows = list(csv.DictReader(io.StringIO(paths["events_csv"].read_text())))
    assert [(r["kind"], r["scope"]) for r in rows] == [(e["kind"], e["scope"])
                                                       for e in doc["events"]]


# Prints the modelling libraries and detectors a command really loaded (lazily bound ones do
# not count).
LOADED_MODELLING = (
    "import sys\nfrom perfcheck.cli import main\ntry:\n"
    "    main(sys.argv[1:], prog_name='perfcheck')\nexcept SystemExit as exc:\n"
    "    assert not exc.code, exc.code\n"
    "print(sorted(m for m in ('pvlib', 'statsmodels', 'statsmodels.api', "
    "'statsmodels.regression.linear_model', 'statsmodels.robust.norms', 'scipy', "
    "'scipy.stats', 'perfcheck.detect.attribution', 'perfcheck.detect.soiling') "
    "if m in sys.modules and type(sys.modules[m]).__name__ != '_LazyModule'))")


@pytest.mark.parametrize("command", [
    ["report", "--month", "2025-06", "--out", "{tmp}/report"],
    ["evidence", "--month", "2025-06", "--out", "{tmp}/bundle.zip"],
    ["check", "--from", "2025-06-01", "--to", "2025-06-30"],
])
def test_view_of_a_stored_analysis_loads_no_modelling_library(demo_db, tmp_path, command):
    """A report, a bundle or a check of an analysed period only reads stored results: pvlib,
    statsmodels, scipy (its statistics, and its package's own start-up) and the detectors
    stay unloaded (about a second of a command's start-up; the figures of
    tests/benchmark.py)."""
    name, *options = (arg.format(tmp=tmp_path) for arg in command)
    out = subprocess.run(
        [sys.executable, "-c", LOADED_MODELLING, name, str(demo_db.site.path), "--db",
         str(demo_db.db_path), *options], capture_output=True, text=True, check=True)
    assert out.stdout.splitlines()[-1] == "[]", out.stdout


def test_age_note_in_methods_and_header(tmp_path):
    # issue 10, item 6: without a commissioning date the report says where ageing starts
    site = write_site(tmp_path)
    site.path.write_text(site.path.read_text().replace("commissioned = 2024-04-01\n", ""))
    site = load_site(site.path)
    result = report_fixtures_checked_with(site.aged(dt.date(2025, 6, 1)), example_check())
    result["settings"].update(site.aged(dt.date(2025, 6, 1)).age_record())
    ctx = report.context(site, result, example_aligned(), {"files": [], "flags": []})
    note = ("Note: no commissioning date in the site file: the age allowance starts at the "
            "first data (2025-06-01); if the modules are older, give site.commissioned or "
            "site.module_age_years_at_first_data.")
    assert ("para", note) in report.pdf_text_blocks(ctx)
    assert not [r for r in ctx["settings_rows"] if r[0].lower().startswith("notes")]
    html = report.render_html(ctx, {stem: b"" for stem, _, _ in figures.FIGURES})
    assert note in html and "commissioning date not given" in html


# What a person must never read in a report or bundle output: notes of how we checked a value,
# Python's literals, scientific notation, the scope codes of the JSON (issue 12, items 2 and 3).
CODE_VALUES = ("from memory", "None", "True", "False", "e+0", "e-0", "inverter:", "[\'")


def _visible_text(html: str) -> str:
    html = re.sub(r"<style>.*?</style>|<pre>.*?</pre>", "", html, flags=re.S)
    html = re.sub(r'src="data:[^"]*"', "", html)
    return re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", html)).replace("&#39;", "'")


def _pdf_text(path: Path) -> str:
    out = subprocess.run(["pdftotext", str(path), "-"], capture_output=True, text=True,
                         check=True).stdout
    return re.sub(r"\s+", " ", out)


def test_no_code_values_in_report(written):
    text = _visible_text(written[1]["html"].read_text(encoding="utf-8"))
    for bad in CODE_VALUES:
        assert bad not in text, bad


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="poppler-utils not installed")
def test_pdf_carries_every_number_of_the_html(written):
    html = _visible_text(written[1]["html"].read_text(encoding="utf-8"))
    pdf = _pdf_text(written[1]["pdf"])
    numbers = set(re.findall(r"\d[\d,.:–+-]*\d|\d", html))
    missing = sorted(n for n in numbers if n not in pdf)
    assert not missing, missing[:20]
    for words in ("Figure 8.", "No. Finding", "Appendix", "Cautions",
                  "checked "):
        assert words in pdf, words


def test_guarantees_csv_rounded_with_the_reports_sign(written):
    site, _ = written
    rows = list(csv.DictReader(io.StringIO(report.guarantees_csv(
        report_fixtures_checked(site)["guarantees"]))))
    warranty = next(r for r in rows if r["kind"] == "module_warranty")
    # the warranty of the invented site: 0.55 %/yr loss promised, shown as a positive loss
    assert warranty["promised"] == "0.55"
    for r in rows:
        for v in r.values():
            assert not re.fullmatch(r"-?\d+\.\d{5,}", v), v


@pytest.mark.skipif(shutil.which("pdftotext") is None, reason="poppler-utils not installed")
def test_bundle_outputs_carry_no_code_values(written, tmp_path, monkeypatch):
    """methods.txt, README.txt and the report inside a bundle, as a person reads them."""
    site, _ = written
    result = report_fixtures_checked(site)
    members = {"methods.txt": evidence.methods_text(result, site.timezone)}
    for name, text in members.items():
        for bad in CODE_VALUES:
            assert bad not in text, (name, bad)
    assert "from memory" not in json.dumps(result)


def report_fixtures_checked(site) -> dict:
    return report_fixtures_checked_with(site, example_check())


def test_daily_energy_as_weeks_beyond_120_days():
    # an invented 200-day frame: a bar per week (Monday to Sunday), axis from zero
    long = example_aligned("2025-01-06", days=200, step_min=60)
    fig = figures.fig_daily_energy(long, "Europe/Zurich")
    ax = fig.axes[0]
    assert "Weekly energy" in ax.get_title(loc="left") and ax.get_ylim()[0] == 0
    assert len(ax.patches) == pytest.approx(200 / 7, abs=1.5)
    weeks = figures.weekly_energy(figures.daily_energy(long, "Europe/Zurich"))
    assert (weeks.index.day_of_week == 0).all()  # labelled by their Monday


def test_loss_chart_marks_its_broken_axis():
    losses = example_check()["losses"]
    ax = figures.fig_loss_attribution(losses).axes[0]
    assert ax.get_ylim()[0] > 0
    assert any("axis broken" in t.get_text() for t in ax.texts)


def test_sky_map_slices_only_where_the_period_holds_them():
    # common practice: a slice needs about 30 days; a month gets one map, 200 days four
    assert figures.sky_slices(example_aligned(days=30)) == 1
    assert figures.sky_slices(example_aligned("2025-01-06", days=200, step_min=60)) == 4
    assert len(figures.fig_shading_map(example_aligned(days=30)).axes) == 2  # map, colour bar


def test_scatter_has_a_marker_per_inverter_and_the_line_on_top():
    ax = figures.fig_power_scatter(example_aligned()).axes[0]
    line = next(ln for ln in ax.lines if ln.get_linestyle() == "--")
    assert line.get_zorder() > max(c.get_zorder() for c in ax.collections)
    texts = [t.get_text() for leg in [ax.get_legend(), *ax.artists] for t in leg.get_texts()]
    assert "inverter INV1" in texts and "inverter INV2" in texts


def test_shading_evidence_bins_in_degrees():
    from perfcheck.detect import shading

    # bin 27 of 10-degree azimuth bins is 270-280 degrees; bin 3 of 5-degree elevation 15-20
    b = shading.labelled_bin({"az": 27, "el": 3, "p_value": 0.001}, 10.0, 5.0)
    assert b == {"azimuth_from_deg": 270.0, "azimuth_to_deg": 280.0, "elevation_from_deg": 15.0,
                 "elevation_to_deg": 20.0, "p_value": 0.001}


@pytest.mark.slow
def test_month_without_data_says_so_and_exits_1(demo_db, tmp_path):
    """The invented demo plant's data end in April 2026: January 2030 has none."""
    site = str(demo_db.site.path)
    r = CliRunner().invoke(main, ["report", site, "--db", str(demo_db.db_path), "--month",
                                  "2030-01", "--out", str(tmp_path / "o")])
    assert r.exit_code == 1, r.output
    assert "No data for January 2030: no feed reported: AC power of inverter inv1" in r.stderr
    html = (tmp_path / "o" / "report.html").read_text(encoding="utf-8")
    assert "No data for January 2030" in html and "Shortfall" in html
    assert html.count('<div class="v">n/a</div>') == 4  # never a green zero shortfall
    assert '<div class="v">0 kWh</div>' not in html
    c = CliRunner().invoke(main, ["check", site, "--db", str(demo_db.db_path), "--from",
                                  "2030-01-01", "--to", "2030-01-31"])
    assert c.exit_code == 1 and "No data for January 2030" in c.stderr
