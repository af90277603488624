"""The scenario suite's tracker plants (issue 14): drawn after the fixed-plane plants, written
with their tracker keys, their stalls and their wind stow in the truth. Generation only (the
analysis of a tracker plant takes minutes; the suite script scores them)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from perfcheck.scenario.suite import DEFAULT_SEED
from perfcheck.scenario.suite.design import TRACKER_FROM, draw_plant
from perfcheck.scenario.suite.generate import MAIN_LOGGER, STATION, generate_plant
from perfcheck.site import load_site

PLANT = 24  # two inverters on trackers: a stall, rows out of step, export limiting


@pytest.fixture(scope="module")
def plant(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("tracker") / f"p{PLANT}"
    generate_plant(out, PLANT, DEFAULT_SEED)
    return out


def test_tracker_plants_come_after_the_fixed_ones() -> None:
    specs = [draw_plant(i, DEFAULT_SEED) for i in range(TRACKER_FROM, TRACKER_FROM + 6)]
    assert all(s.tracker is not None for s in specs)
    assert draw_plant(TRACKER_FROM - 1, DEFAULT_SEED).tracker is None
    assert sum(not s.kinds for s in specs) == 2  # every fifth plant is fault-free
    assert all(s.kinds[0] == "tracker_stall" for s in specs if s.kinds)
    assert {s.design for s in specs} == {"tracker", "tracker_bifacial"}


def test_site_file_and_truth(plant: Path) -> None:
    site = load_site(plant / "site.toml")
    spec = draw_plant(PLANT, DEFAULT_SEED)
    arrays = [a for inv in site.inverters for a in inv.arrays]
    assert all(a.tracker is not None and a.gcr == spec.tracker.gcr for a in arrays)
    truth = json.loads((plant / "truth.json").read_text(encoding="utf-8"))
    kinds = [f["kind"] for f in truth["faults"]]
    assert kinds.count("tracker_stall") == 1 and kinds.count("tracker_out_of_step") == 1
    stall = next(f for f in truth["faults"] if f["kind"] == "tracker_stall")
    assert stall["energy_loss_kwh"] > 0
    assert stall["parameters"]["angle_deg"] == spec.tracker_faults[0].angle_deg
    stows = [f for f in truth["faults"] if f["kind"] == "wind_stow"]
    assert stows and all(f["design"] for f in stows)
    limit = truth["scenario"]["stow_wind_speed_ms"]
    met = pd.concat(pd.read_csv(p) for p in sorted(plant.glob(f"{STATION}_*.csv")))
    # invented truth: the rows stow wherever the logged wind reaches the limit, by day
    assert (met["wind"] >= limit).any()


def test_files_hold_the_truth_energy(plant: Path) -> None:
    # invented truth: the inverter power in the files is the truth's AC power with 0.2 %
    # white noise, so the year's energy agrees to well within 0.1 %
    truth = json.loads((plant / "truth.json").read_text(encoding="utf-8"))
    spec = draw_plant(PLANT, DEFAULT_SEED)
    semi = spec.csv_style == "semicolon"
    frames = [pd.read_csv(p, sep=";" if semi else ",", decimal="," if semi else ".")
              for p in sorted(plant.glob(f"{MAIN_LOGGER}_*.csv"))]
    logged = pd.concat(frames)
    for inv in spec.inverters:
        kwh = float(logged[f"P_{inv.id}"].sum() * spec.interval_min / 60)
        np.testing.assert_allclose(kwh, truth["totals"]["by_inverter_kwh"][inv.id], rtol=1e-3)
