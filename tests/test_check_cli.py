"""``perfcheck check``: table, JSON document against its schema, stored results, errors."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys

import jsonschema
import pytest
from click.testing import CliRunner
from metrics_support import connect_with, make_site, synthetic_aligned, write_site

from perfcheck import db, metrics
from perfcheck.cli import main
from perfcheck.cli.check import findings_table


@pytest.fixture(scope="module")
def checked(tmp_path_factory):
    """A two-inverter invented site with five weeks of aligned data, checked once."""
    tmp = tmp_path_factory.mktemp("check")
    site_path = write_site(tmp / "hollerbach.toml", n_inverters=2)
    frame = synthetic_aligned(make_site(n_inverters=2), "2025-05-25", "2025-07-02")
    connect_with(frame, path=tmp / "hollerbach.duckdb").close()
    out = tmp / "check.json"
    result = CliRunner().invoke(main, ["check", str(site_path), "--from", "2025-06-01", "--to",
                                       "2025-06-30", "--json", str(out)])
    return site_path, result, out


def test_check_prints_the_monthly_table(checked):
    _, result, _ = checked
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert lines[0].startswith("Testfeld Hollerbach: 2025-06-01 to 2025-07-01")
    assert any(line.startswith("2025-06 ") for line in lines)
    assert any(line.startswith("period ") for line in lines)
    assert "PR T-corr %" in result.output and "coverage" in result.output
    # the least soiling the analysis could have seen, in words (as in the report)
    assert "Soiling losses below " in result.output and " % per cycle" in result.output


def test_check_prints_the_findings_in_words_and_local_time():
    # invented events as analysis.view returns them (ISO 8601 with the site's offset)
    events = [
        {"kind": "partial_outage", "scope": "inverter:INV2", "start": "2024-10-03T09:15:00+02:00",
         "end": "2024-10-21T18:00:00+02:00", "energy_loss_kwh": 1443.21,
         "energy_loss_kwh_low": 1204.5, "energy_loss_kwh_high": 49999.0},
        {"kind": "clipping", "scope": "plant", "start": "2024-06-03T11:00:00+02:00",
         "end": "2024-06-03T14:30:00+02:00", "energy_loss_kwh": 3.21,
         "energy_loss_kwh_low": 1.44, "energy_loss_kwh_high": 57.6},
        {"kind": "sensor_fault", "scope": "plant", "start": "2024-11-03T00:00:00+01:00",
         "end": "2024-11-05T00:00:00+01:00", "energy_loss_kwh": 0.0,
         "energy_loss_kwh_low": 0.0, "energy_loss_kwh_high": 0.0},
    ]
    lines = findings_table(events, "Europe/Berlin")
    assert lines[0] == "Findings: 3 (times in Europe/Berlin, with the UTC offset)"
    assert lines[1].split() == ["finding", "where", "from", "to", "(excluded)", "energy",
                                "[kWh]", "(95", "%", "band)"]
    assert lines[2].split() == ["clipping", "below", "the", "AC", "rating", "the", "plant",
                                "2024-06-03", "11:00+02:00",
                                "2024-06-03", "14:30+02:00", "3.2", "(1.4", "to", "58)"]
    assert lines[3].split() == ["partial", "outage", "inverter", "INV2", "2024-10-03",
                                "09:15+02:00", "2024-10-21", "18:00+02:00", "1,440", "(1,200",
                                "to", "50,000)"]
    assert lines[4].split() == ["irradiance", "sensor", "fault", "the", "plant", "2024-11-03",
                                "00:00+01:00",
                                "2024-11-05", "00:00+01:00", "none"]  # no energy lost
    assert findings_table([], "Europe/Berlin") == ["Findings: none."]


def test_check_output_holds_no_code_values(checked):
    _, result, _ = checked
    table = result.output.split("period ", 1)[1]  # after the monthly table
    assert "Findings:" in table
    for code in ("_", "inverter:", "e+", "None", "True"):
        assert code not in table, code


def test_check_json_follows_its_schema(checked):
    _, _, out = checked
    doc = json.loads(out.read_text())
    jsonschema.validate(doc, metrics.load_schema("check"))
    assert doc["period"] == {"start": "2025-06-01T00:00:00+02:00",
                             "end": "2025-07-01T00:00:00+02:00"}
    june = doc["metrics"]["monthly"][0]
    assert june["month"] == "2025-06" and len(june["inverters"]) == 2
    for key in ("pr", "pr_temp_corrected", "pr_weather_corrected", "epi", "availability",
                "specific_yield_kwh_per_kwp"):
        assert june[f"{key}_ci_low"] <= june[key] <= june[f"{key}_ci_high"]
    assert len(doc["metrics"]["daily"]) == 30
    assert doc["site"]["site_file"] == "hollerbach.toml"  # no absolute paths
    # stored by the analysis, whole history: the step a wash must make, as a loss per cycle
    lim = doc["losses"]["soiling_detection_limit"]
    assert lim["days"] > 0 and lim["alpha"] == 1e-3 and 0 < lim["loss_pct"] < 100


def test_check_schema_refuses_a_broken_document(checked):
    _, _, out = checked
    doc = json.loads(out.read_text())
    doc["metrics"]["monthly"][0]["pr"] = "high"
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(doc, metrics.load_schema("check"))
    doc = json.loads(out.read_text())
    doc["events"].append({"kind": "gremlins", "scope": "plant"})
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(doc, metrics.load_schema("check"))


def test_check_json_to_stdout_is_the_document_alone(checked, tmp_path, monkeypatch):
    site_path, _, out = checked
    monkeypatch.chdir(tmp_path)
    copy = shutil.copyfile(db.default_db_path(site_path), tmp_path / "copy.duckdb")
    r = CliRunner().invoke(main, ["check", str(site_path), "--db", str(copy), "--from",
                                  "2025-06-01", "--to", "2025-06-30", "--json", "-"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)  # nothing but the JSON on stdout
    assert doc["metrics"] == json.loads(out.read_text())["metrics"]
    assert r.stderr.startswith("Testfeld Hollerbach: ")  # the table went to stderr
    assert not (tmp_path / "-").exists()


NOISY = """
import logging, sys, warnings
import numpy as np
from perfcheck import metrics
real = metrics.compute
def noisy(*args, **kwargs):
    np.array([1.0]) / np.array([0.0])  # numpy's RuntimeWarning: divide by zero
    warnings.warn("an invented library warning", UserWarning)
    logging.getLogger("matplotlib.font_manager").warning("an invented font warning")
    return real(*args, **kwargs)
metrics.compute = noisy
from perfcheck.cli import main
main(sys.argv[1:], prog_name="perfcheck")
"""


@pytest.mark.parametrize("log", [False, True])
def test_warnings_go_to_the_log_never_to_stderr(checked, tmp_path, log):
    """cron mails whatever reaches stderr: a command that warns prints nothing there."""
    site_path, _, _ = checked
    copy = shutil.copyfile(db.default_db_path(site_path), tmp_path / "copy.duckdb")
    log_file = tmp_path / "perfcheck.log"
    args = ["--log", str(log_file)] if log else []
    out = subprocess.run([sys.executable, "-c", NOISY, *args, "check", str(site_path), "--db",
                          str(copy), "--from", "2025-06-01", "--to", "2025-06-30"],
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stderr == ""
    assert out.stdout.startswith("Testfeld Hollerbach: ")
    if log:
        text = log_file.read_text()
        assert "WARNING perfcheck.warnings: RuntimeWarning: divide by zero" in text
        assert "UserWarning: an invented library warning" in text
        assert "WARNING matplotlib.font_manager: an invented font warning" in text
        assert "INFO perfcheck.progress: check: metrics and findings: done in " in text


def test_check_reads_the_stored_analysis(checked):
    site_path, _, out = checked
    con = db.connect(db.default_db_path(site_path), read_only=True)
    (n,) = con.execute("SELECT count(*) FROM analyses WHERE is_current").fetchone()
    assert n == 1
    (days,) = con.execute("SELECT count(DISTINCT day) FROM analysis_daily").fetchone()
    assert days >= 1
    con.close()
    doc = json.loads(out.read_text())
    assert doc["analysis"]["id"] >= 1 and len(doc["analysis"]["input_hash"]) == 64


def test_check_errors_are_one_line(tmp_path):
    runner = CliRunner()
    site_path = write_site(tmp_path / "hollerbach.toml")
    r = runner.invoke(main, ["check", str(site_path)])
    assert r.exit_code == 2
    assert r.output == (f"perfcheck: error: {tmp_path / 'hollerbach.duckdb'}: no database yet "
                        "(run 'perfcheck ingest' first)\n")
    bad = write_site(tmp_path / "bad.toml", metrics={"min_coverage": 2})
    r = runner.invoke(main, ["check", str(bad)])
    assert r.exit_code == 2
    assert r.output == (f"perfcheck: error: {bad}: metrics.min_coverage: 2.0 is outside the "
                        "range 0 to 1\n")
    connect_with(synthetic_aligned(make_site(), "2025-06-01", "2025-06-03"),
                 path=tmp_path / "hollerbach.duckdb").close()
    r = runner.invoke(main, ["check", str(site_path), "--from", "2025-06-03", "--to",
                             "2025-06-01"])
    assert r.exit_code == 2
    assert r.output == "perfcheck: error: --to 2025-06-01 is before --from 2025-06-03\n"
    target = tmp_path / "missing" / "check.json"
    r = runner.invoke(main, ["check", str(site_path), "--json", str(target)])
    assert r.exit_code == 2
    assert r.output == f"perfcheck: error: {target}: the folder for the JSON file does not exist\n"


def test_schemas_ship_inside_the_package():
    import importlib.resources

    files = importlib.resources.files("perfcheck") / "schemas"
    for name in ("check", "capacity"):
        schema = json.loads((files / f"{name}.schema.json").read_text(encoding="utf-8"))
        jsonschema.Draft202012Validator.check_schema(schema)


def test_schema_event_kinds_are_the_kinds_table():
    """Every list of event kinds in the shipped schema is perfcheck.kinds' table, in order."""
    from perfcheck import kinds

    found = []

    def walk(node):
        if isinstance(node, dict):
            if "outage" in node.get("enum", []):
                found.append(node["enum"])
            for v in node.values():
                walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)

    walk(metrics.load_schema("check"))
    assert len(found) >= 2 and all(e == list(kinds.NAMES) for e in found)


def test_an_interval_shows_only_where_wider_than_the_rounding():
    # issue 12, item 5: no "100.0 100.0-100.0" clutter in the monthly table
    from perfcheck.cli.check import _band

    assert _band({"availability": 1.0, "availability_ci_low": 0.99996,
                  "availability_ci_high": 1.0}, "availability").split() == ["100.0"]
    assert _band({"pr": 0.855, "pr_ci_low": 0.82, "pr_ci_high": 0.89}, "pr").split() == [
        "85.5", "82.0-89.0"]


def test_rules_and_coefficients_read_as_words_and_numbers():
    # issue 12, items 2 and 3: no setting names or scientific notation where a person reads
    from perfcheck.cli.capacity import coef

    for rule in metrics.rules(metrics.Settings()):
        assert "_" not in rule and ">=" not in rule, rule
    assert "irradiance at least 0 W/m2" in " ".join(metrics.rules(metrics.Settings()))
    assert coef(1.1423e-06) == "1.1423×10⁻⁶" and coef(0.14143) == "0.14143"
