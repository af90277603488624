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
    # the ingest accounting, per file and in total
    assert "rows read =" in text and "total: 49 file(s) loaded" in text
    for heading in ("data coverage", "expected against measured", "performance per month",
                    "capacity test", "report and evidence bundle"):
        assert heading in text
    assert "verify: verified" in text
    for name in ("site.toml", "site.duckdb", "check.json", "capacity.json", "evidence.zip",
                 "report/report.html", "report/report.pdf"):
        assert (out / name).is_file(), name
    doc = json.loads((out / "check.json").read_text(encoding="utf-8"))
    losses = doc["losses"]
    parts = sum(losses["by_cause_kwh"].values()) + losses["unexplained_kwh"]
    # JSON keeps 7 significant digits of each energy
    assert parts == pytest.approx(losses["expected_kwh"] - losses["measured_kwh"], abs=0.1)
    assert list(cwd.iterdir()) == [], "the demo wrote outside its --out folder"
