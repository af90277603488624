"""The suite's scorer on small invented truth and check documents (the truth is stated here)."""

from __future__ import annotations

import pytest

from perfcheck.scenario.suite import score


def _fault(kind: str, scope: str, start: str, end: str, kwh: float, **params: object) -> dict:
    return {"kind": kind, "scope": scope, "start": start, "end": end, "energy_loss_kwh": kwh,
            "parameters": dict(params)}


def _event(kind: str, scope: str, start: str, end: str, kwh: float, low: float, high: float,
           **extra: object) -> dict:
    return {"kind": kind, "scope": scope, "start": start, "end": end, "energy_loss_kwh": kwh,
            "energy_loss_kwh_low": low, "energy_loss_kwh_high": high, **extra}


def _month(month: str, pr: float, lo: float, hi: float) -> dict:
    return {"month": month, "pr": pr, "pr_ci_low": lo, "pr_ci_high": hi}


TRUTH = {
    "scenario": {"suite_plant": 7},
    "faults": [
        _fault("outage", "inverter:wr1", "2023-05-10T08:00:00-04:00",
               "2023-05-12T16:00:00-04:00", 100.0),
        _fault("soiling", "plant", "2023-07-01T06:00:00-04:00", "2023-08-01T10:00:00-04:00",
               50.0, loss_pct_of_clean=2.0),
        _fault("sensor_fault", "plant", "2023-09-01T00:00:00-04:00",
               "2023-09-20T00:00:00-04:00", 0.0, mode="step"),
        _fault("degradation", "plant", "2023-03-01T00:00:00-05:00",
               "2025-03-01T00:00:00-05:00", 900.0, rate_pct_per_year=-0.8),
        {**_fault("clipping", "inverter:wr2", "2023-03-02T11:00:00-05:00",
                  "2024-09-01T13:00:00-04:00", 300.0), "design": True},
    ],
    "monthly": [{"month": "2023-04", "pr": 0.85}, {"month": "2023-05", "pr": 0.80},
                {"month": "2023-06", "pr": 0.84}],
}
DOC = {
    "events": [
        # the outage, found half a day late at the start, 10 % short, band covering the truth
        _event("outage", "inverter:wr1", "2023-05-10T20:00:00-04:00",
               "2023-05-12T16:00:00-04:00", 90.0, 80.0, 105.0),
        # soiling in two pieces: 30 + 30 = 60 kWh against 50 (band 40..70 covers it)
        _event("soiling", "plant", "2023-07-01T06:00:00-04:00", "2023-07-15T00:00:00-04:00",
               30.0, 20.0, 35.0),
        _event("soiling", "plant", "2023-07-15T00:00:00-04:00", "2023-08-03T00:00:00-04:00",
               30.0, 20.0, 35.0),
        # natural clipping, matched to the design entry: neither scored nor false
        _event("clipping", "inverter:wr2", "2023-03-02T11:00:00-05:00",
               "2024-09-01T13:00:00-04:00", 280.0, 200.0, 350.0, design=True),
        # an outage where none was: false
        _event("outage", "inverter:wr2", "2023-06-01T08:00:00-04:00",
               "2023-06-01T12:00:00-04:00", 5.0, 4.0, 6.0),
    ],
    "degradation": {"rate_pct_per_year": -0.6, "ci_low": -0.7, "ci_high": -0.5},
    "metrics": {"monthly": [_month("2023-04", 0.8585, 0.84, 0.87),
                            _month("2023-05", 0.75, 0.7, 0.8),
                            _month("2023-06", 0.84, 0.80, 0.83)]},
}


@pytest.fixture(scope="module")
def scored() -> dict:
    return score.score_plant(TRUTH, DOC)


def _row(scored: dict, kind: str) -> dict:
    return next(r for r in scored["faults"] if r["kind"] == kind)


def test_outage_found_with_window_and_energy_errors(scored: dict) -> None:
    r = _row(scored, "outage")
    assert r["found"]
    assert r["window_error_days"] == pytest.approx(0.5)  # 12 h late at the start
    assert r["energy_error_pct"] == pytest.approx(-10.0)
    assert r["covered"] is True


def test_soiling_pieces_add_up(scored: dict) -> None:
    r = _row(scored, "soiling")
    assert r["found"]
    assert r["window_error_days"] == pytest.approx(1 + 14 / 24)  # ends 2 days 00:00 vs 10:00
    assert r["energy_error_pct"] == pytest.approx(20.0)
    # clean energy 50 / 2 % = 2500 kWh: 10 kWh too much is 0.4 percentage points
    assert r["soiling_error_pp"] == pytest.approx(0.4)
    assert r["covered"] is True


def test_missed_sensor_fault_and_degradation(scored: dict) -> None:
    assert not _row(scored, "sensor_fault")["found"]
    d = _row(scored, "degradation")
    assert d["found"] and d["rate_error"] == pytest.approx(0.2)
    assert d["covered"] is False  # -0.8 outside [-0.7, -0.5]


def test_design_entries_are_not_faults_and_not_false(scored: dict) -> None:
    assert [r["kind"] for r in scored["faults"]].count("clipping") == 0
    assert [(e["kind"], e["scope"]) for e in scored["false_events"]] == [
        ("outage", "inverter:wr2")]
    assert not scored["fault_free"]


def test_pr_only_on_healthy_months(scored: dict) -> None:
    # May holds the outage; June is healthy (a false event is no truth fault), so is April.
    months = {m["month"]: m for m in scored["pr"]}
    assert set(months) == {"2023-04", "2023-06"}
    assert months["2023-04"]["pr_error_pct"] == pytest.approx(1.0)
    assert months["2023-04"]["covered"] is True
    assert months["2023-06"]["covered"] is False


def test_design_event_does_not_find_a_derate() -> None:
    truth = {**TRUTH, "faults": [_fault("clipping", "inverter:wr2", "2023-05-01T00:00:00-04:00",
                                        "2023-05-20T00:00:00-04:00", 200.0)]}
    r = score.score_plant(truth, DOC)
    assert not r["faults"][0]["found"]
    assert ("clipping", "inverter:wr2") in [(e["kind"], e["scope"]) for e in r["false_events"]]


def test_targets_and_table(scored: dict) -> None:
    free = score.score_plant({**TRUTH, "faults": []}, DOC)
    plants = [scored, free]
    verdicts = {t.name: t for t in score.targets(plants)}
    found = verdicts["faults found with the right kind and scope (>= 90 %)"]
    assert (found.value, found.passed) == ("3/4", False)
    false = verdicts["no false outage or string fault on a fault-free plant"]
    assert false.passed is False  # both outages are false on the fault-free plant
    assert verdicts["export limiting found on every day"].passed is None
    table = {r["kind"]: r for r in score.kind_table(plants)}
    assert table["outage"]["injected"] == 1 and table["outage"]["false"] == 3
    assert table["outage"]["false_fault_free"] == 2
    text = score.format_report(plants)
    assert "FAIL  faults found with the right kind and scope (>= 90 %): 3/4" in text


def test_pr_months_split_by_irradiance_input(scored: dict) -> None:
    # the invented plant logs no POA sensor: its two healthy months (0 % and +1.0 %, which
    # floating point puts a hair outside; the third month is the outage's) count under GHI
    # only, a plant with a sensor and a month 2 % off under the other
    assert scored["irradiance"] == "GHI only"
    sensor = {**scored, "irradiance": "in-plane sensor",
              "pr": [{"month": "2023-04", "pr_error_pct": 2.0, "covered": True}]}
    text = score.format_report([scored, sensor])
    assert "within +-1 % by irradiance input: GHI only 1/2, in-plane sensor 0/1" in text


def test_tracker_stall_scored_and_stow_called_fault_counted() -> None:
    # invented truth: a stall of wr1 for two days and a wind stow (design) on 1 June; the
    # check finds the stall 6 h late with 10 % more energy, shows the stow as wind_stow and
    # also calls the stow hours an outage of wr2
    truth = {"scenario": {"suite_plant": 23}, "monthly": [], "faults": [
        _fault("tracker_stall", "inverter:wr1", "2023-05-10T08:00:00-04:00",
               "2023-05-12T08:00:00-04:00", 40.0, mode="stall", angle_deg=20.0),
        {**_fault("wind_stow", "plant", "2023-06-01T10:00:00-04:00",
                  "2023-06-01T14:00:00-04:00", 8.0), "design": True}]}
    doc = {"events": [
        _event("tracker_stall", "inverter:wr1", "2023-05-10T14:00:00-04:00",
               "2023-05-12T08:00:00-04:00", 44.0, 38.0, 50.0, angle_deg=21.0),
        _event("wind_stow", "plant", "2023-06-01T10:00:00-04:00", "2023-06-01T14:00:00-04:00",
               7.5, 7.5, 7.5, design=True),
        _event("outage", "inverter:wr2", "2023-06-01T11:00:00-04:00",
               "2023-06-01T13:00:00-04:00", 3.0, 2.0, 4.0)],
        "metrics": {"monthly": []}}
    r = score.score_plant(truth, doc)
    row = r["faults"][0]
    assert (row["kind"], row["found"], row["covered"]) == ("tracker_stall", True, True)
    assert row["window_error_days"] == pytest.approx(0.25)
    assert row["energy_error_pct"] == pytest.approx(10.0)
    assert [e["kind"] for e in r["false_events"]] == ["outage"]
    assert [e["kind"] for e in r["stow_called_fault"]] == ["outage"]
    verdicts = {t.name: t for t in score.targets([r])}
    assert verdicts["wind stow never reported as a fault"].passed is False
    assert verdicts["tracker stalls and rows out of step found (>= 90 %)"].passed is True
