"""``perfcheck demo`` end to end, as a new user runs it (synthetic truth: perfcheck.scenario)."""

from __future__ import annotations

import json
import os

import pytest
from click.testing import CliRunner

from perfcheck.cli import main


@pytest.mark.slow
def test_demo_runs_every_stage_inside_its_folder(tmp_path):
    out, cwd = tmp_path / "out", tmp_path / "cwd"
    cwd.mkdir()
    before = os.getcwd()
    os.chdir(cwd)
    try:
        result = CliRunner().invoke(main, ["demo", "--out", str(out), "--quiet"])
    finally:
        os.chdir(before)
    assert result.exit_code == 0, result.output
    text = result.output
    # the ingest accounting in total only; the key tables; at most about 100 lines
    assert "total: 49 file(s) loaded" in text and "rows read =" in text
    for heading in ("data coverage", "performance per month, findings", "Findings: ",
                    "capacity test", "report and evidence bundle"):
        assert heading in text
    assert "evidence bundle verified" in text
    assert len(text.splitlines()) <= 110
    # the last lines name the files to open
    assert text.splitlines()[-4:] == [
        f"report:          {out / 'report' / 'report.html'}",
        f"report as PDF:   {out / 'report' / 'report.pdf'}",
        f"evidence bundle: {out / 'evidence.zip'} ({text.split('evidence.zip (')[1].split()[0]}"
        " files)",
        f"check document:  {out / 'check.json'}"]
    for name in ("site.toml", "site.duckdb", "check.json", "capacity.json", "evidence.zip",
                 "report/report.html", "report/report.pdf"):
        assert (out / name).is_file(), name
    doc = json.loads((out / "check.json").read_text(encoding="utf-8"))
    losses = doc["losses"]
    parts = sum(losses["by_cause_kwh"].values()) + losses["unexplained_kwh"]
    # JSON keeps 7 significant digits of each energy
    assert parts == pytest.approx(losses["expected_kwh"] - losses["measured_kwh"], abs=0.1)
    assert list(cwd.iterdir()) == [], "the demo wrote outside its --out folder"
