"""The export meter (perfcheck.meter): settings, register differencing, placement on the
ledger, and the plant's figures at the meter on the invented demo plant.

Sources: IEC 61724-1 defines the final yield Y_f = E_out / P0 with E_out the system's AC
output where it is delivered, and PR = Y_f / Y_r; a cumulative register's energy over a
period is the difference of its readings at the period's ends (common practice for energy
meters). The demo truth (``demo_logs/truth.json``, written by perfcheck.scenario) states the
meter's design AC loss (1 %) and the energy its register counted across each logger gap.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from logger_files import DEFAULT_COLUMNS, logger_toml, run_ingest, write_case

from perfcheck import analysis, meter, metrics, pipeline, report
from perfcheck.cli.check import format_table
from perfcheck.scenario.sitefile import METER_AC_LOSS_PCT
from perfcheck.site import load_site

GOOD = "ts,P,G,E\n2024-06-01 10:00,1,100,5\n"
METER_COLUMNS = (*DEFAULT_COLUMNS, ("E", "energy_register", "kWh", "plant"))


# --------------------------------------------------------------------------------------------
# settings


@pytest.mark.parametrize("columns, section, message", [
    (METER_COLUMNS, "ac_loss_pct = 25", "meter.ac_loss_pct: 25.0 is outside the range 0 to 20"),
    (METER_COLUMNS, "ac_loss_pct = nan", "meter.ac_loss_pct: expected a finite number, got nan"),
    (METER_COLUMNS, 'ac_loss_pct = "1 %"',
     "meter.ac_loss_pct: expected a number, got str '1 %'"),
    (METER_COLUMNS, 'basis = "grid"',
     "meter.basis: 'grid' is not one of 'auto', 'meter', 'inverters'"),
    (METER_COLUMNS, "ac_losses_pct = 1",
     "meter.ac_losses_pct: unknown key (known keys here: ac_loss_pct, basis)"),
    (DEFAULT_COLUMNS, 'basis = "meter"',
     'meter.basis: "meter" needs a meter column: a [[loggers.columns]] with inverter = '
     '"plant" and quantity energy_register or energy_interval'),
    (DEFAULT_COLUMNS, "ac_loss_pct = 1",
     "meter.ac_loss_pct: the site file maps no meter to apply it to (a [[loggers.columns]] "
     'with inverter = "plant" and quantity energy_register or energy_interval)'),
])
def test_bad_meter_settings_give_one_line_naming_the_key(tmp_path, columns, section, message):
    site, log = write_case(tmp_path, GOOD, loggers=logger_toml(columns=columns))
    site.write_text(site.read_text() + f"\n[meter]\n{section}\n")
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == f"perfcheck: error: {site}: {message}\n"


def test_basis_follows_the_meter_column(tmp_path):
    """With a meter column the plant is judged at the meter unless told otherwise; without one
    at the inverters, and the words say which (the check document states them)."""
    site, _ = write_case(tmp_path, GOOD, loggers=logger_toml(columns=METER_COLUMNS))
    at = meter.load_settings(load_site(site))
    assert (at.basis, at.ac_loss_pct, at.channels) == ("meter", 0.0,
                                                       ("column E of logger main",))
    assert "at the export meter" in at.words()
    site.write_text(site.read_text() + '\n[meter]\nbasis = "inverters"\nac_loss_pct = 1.5\n')
    at = meter.load_settings(load_site(site))
    assert (at.basis, at.factor) == ("inverters", pytest.approx(0.985))
    assert "at the inverters" in at.words() and "reconciled" in at.words()
    (tmp_path / "plain").mkdir()
    plain, _ = write_case(tmp_path / "plain", GOOD)
    at = meter.load_settings(load_site(plain))
    assert not at.has_meter and "maps no export meter" in at.words()


# --------------------------------------------------------------------------------------------
# register differencing and placement (common practice: energy = difference of readings)

T0 = pd.Timestamp("2024-06-01 10:00", tz="UTC")
FIVE = pd.Timedelta(minutes=5)


def _raw(values, minutes, column="register_wh"):
    ts = [T0 + pd.Timedelta(minutes=m) for m in minutes]
    other = "energy_interval_wh" if column == "register_wh" else "register_wh"
    return pd.DataFrame({"ts": ts, column: values, other: np.nan})


def test_register_steps_are_the_differences_of_its_readings():
    # a reading stored at an interval's start counts to that interval's end, so the step
    # between readings at 10:00 and 10:05 is the energy of [10:05, 10:10)
    sp = meter.spans(_raw([100.0, 110.0, 125.0], [0, 5, 10]), 300, None, None, 1e6)
    assert sp["energy_wh"].tolist() == [10.0, 15.0]
    assert list(sp["lo"]) == [T0 + FIVE, T0 + 2 * FIVE]
    assert not sp["gap"].any()


def test_register_rollover_reset_and_implausible_steps():
    # wraps at 1000 Wh: 990 -> 5 is 15 Wh; a replaced meter (125 -> 0) is no energy; a step
    # above 1.5 times the rating over its time (100 kWh in 5 min on a 10 kW plant) neither
    sp = meter.spans(_raw([990.0, 5.0, 25.0], [0, 5, 10]), 300, 1000.0, None, 1e6)
    assert sp["energy_wh"].tolist() == [15.0, 20.0]
    sp = meter.spans(_raw([100.0, 125.0, 0.0, 10.0], [0, 5, 10, 15]), 300, None, None, 1e6)
    assert sp["energy_wh"].tolist() == [25.0, 10.0]
    sp = meter.spans(_raw([0.0, 100_000.0], [0, 5]), 300, None, None, 10_000.0)
    assert sp.empty


def test_register_step_across_a_gap_takes_the_shape_of_the_expected_power():
    """Readings at 10:00 and 10:15 (10:05 and 10:10 lost): 60 Wh over [10:05, 10:20), spread
    over the three intervals as the expected power 1 : 2 : 3 (invented numbers)."""
    sp = meter.spans(_raw([100.0, 160.0], [0, 15]), 300, None, None, 1e6)
    assert sp["gap"].tolist() == [True]
    index = pd.date_range(T0, periods=5, freq="5min")
    placed = meter.place(sp, index, np.full(5, 300.0), np.array([9.0, 1.0, 2.0, 3.0, 9.0]))
    np.testing.assert_allclose(placed.energy_wh, [np.nan, 10.0, 20.0, 30.0, np.nan])
    assert placed.shaped.tolist() == [False, True, True, True, False]
    assert placed.unplaced_wh == 0.0
    # at night (no expected power) the energy is spread evenly over the intervals
    placed = meter.place(sp, index, np.full(5, 300.0), np.zeros(5))
    np.testing.assert_allclose(placed.energy_wh, [np.nan, 20.0, 20.0, 20.0, np.nan])
    # a span over no ledger interval is reported, not lost silently
    later = meter.place(sp, index + pd.Timedelta(days=1), np.full(5, 300.0), np.ones(5))
    assert np.isnan(later.energy_wh).all() and later.unplaced_wh == 60.0


def test_interval_energy_goes_to_its_interval():
    sp = meter.spans(_raw([7.0, 8.0], [0, 5], "energy_interval_wh"), 300, None, None, 1e6)
    index = pd.date_range(T0, periods=2, freq="5min")
    placed = meter.place(sp, index, np.full(2, 300.0), np.ones(2))
    np.testing.assert_allclose(placed.energy_wh, [7.0, 8.0])
    assert not placed.shaped.any()


def test_meter_energy_is_shared_by_measured_energy_then_expected():
    measured = np.array([[30.0, 10.0], [np.nan, 10.0], [0.0, 0.0]])
    expected = np.array([[35.0, 12.0], [30.0, 12.0], [0.0, 0.0]])
    got = meter.share(np.array([39.0, 42.0, 4.0]), measured, expected)
    np.testing.assert_allclose(got, [[29.25, 9.75], [31.5, 10.5], [2.0, 2.0]])


# --------------------------------------------------------------------------------------------
# the demo plant at its meter


@pytest.fixture(scope="module")
def whole(demo_db):
    con = demo_db.connect()
    try:
        start, end = metrics.resolve_period(con, demo_db.site, None, None)
        doc = pipeline.view(con, demo_db.site, start, end)
        ledger = con.execute(
            "SELECT l.* FROM ledger l JOIN analyses a USING (analysis_id) WHERE a.is_current"
        ).df()
        register = con.execute(
            "SELECT ts, value FROM readings WHERE device = 'plant' ORDER BY ts").df()
    finally:
        con.close()
    ledger["ts"] = pd.to_datetime(ledger["ts"], utc=True)
    return doc, ledger, register


def test_demo_plant_figures_are_at_the_meter(whole, demo_db):
    """IEC 61724-1: Y_f = E_out / P0 and PR = Y_f / Y_r with E_out at the point of delivery.
    The demo's meter counts the inverters' output less 1 % (truth), so the plant's PR at the
    meter is the inverters' PR less about 1 % (tolerance 0.2 % of PR: the meter's 0.1 kWh
    register resolution and the intervals where only one of the two has energy)."""
    doc, _, _ = whole
    assert doc["settings"]["plant_basis"].startswith("plant yields and PR at the export meter")
    p = doc["metrics"]["period"]
    inv_e = sum(i["measured_kwh"] for i in p["inverters"])
    # the inverters' PR: their energy over their reference yields, P0-weighted (the plant at
    # the meter also counts the logger gaps the meter bridged, so its own Y_r differs a little)
    p0 = [demo_db.site.inverter(i["scope"][9:]).dc_kwp for i in p["inverters"]]
    inv_pr = sum(i["pr"] * i["yr_h"] * k for i, k in zip(p["inverters"], p0, strict=True)) \
        / sum(i["yr_h"] * k for i, k in zip(p["inverters"], p0, strict=True))
    assert p["pr"] == pytest.approx(inv_pr * (1 - METER_AC_LOSS_PCT / 100), rel=2e-3)
    assert p["yf_h"] == pytest.approx(p["pr"] * p["yr_h"], rel=1e-6)
    assert p["measured_kwh"] == pytest.approx(inv_e, abs=0.5)  # the inverters' energy stays
    rec = p["meter"]
    assert rec["expected_ac_loss_pct"] == METER_AC_LOSS_PCT
    assert rec["difference_pct"] == pytest.approx(METER_AC_LOSS_PCT, abs=0.05)


def test_delivered_energy_is_the_register_difference(whole):
    """Common practice: a register's energy over a period is the difference of its readings;
    the demo's register restarts once (a replaced meter, truth ``meter_reset``), so the sum is
    taken on both sides of it. The ledger's delivered energy must equal it to within the
    energy the placement cannot use (the reset step, night steps outside the ledger): 0.1 %."""
    doc, ledger, register = whole
    v = register["value"].to_numpy()
    steps = np.diff(v)
    total_kwh = steps[steps >= 0].sum() / 1000.0
    delivered_kwh = ledger["delivered_wh"].sum() / 1000.0
    assert delivered_kwh == pytest.approx(total_kwh, rel=1e-3)


def test_register_across_a_logger_gap_is_measured_energy(whole, demo_db):
    """Demo truth: in each gap of the main logger the register kept counting
    (``metered_kwh``). That energy is on the ledger as delivered energy in the gap's
    intervals, shaped by the expected power (tolerance 3 %: the step that spans the gap also
    covers the first interval after it, which takes its expected share), and no outage
    event covers a gap."""
    doc, ledger, _ = whole
    truth = json.loads((demo_db.logs / "truth.json").read_text())
    gaps = [e for e in truth["logger_habits"] + truth["faults"]
            if e["kind"] == "data_gap" and "metered_kwh" in e["parameters"]]
    assert gaps
    for g in gaps:
        a, b = pd.Timestamp(g["start"]), pd.Timestamp(g["end"])
        inside = ledger[(ledger["ts"] >= a) & (ledger["ts"] < b)]
        assert inside["measured_wh"].isna().all()
        got = inside["delivered_wh"].sum() / 1000.0
        assert inside["delivered_shaped"].all()  # marked: spread in the expected shape
        assert got == pytest.approx(g["parameters"]["metered_kwh"], rel=0.03), g["start"]
        assert not [e for e in doc["events"] if e["kind"] == "outage"
                    and e["start"] < g["end"] and e["end"] > g["start"]]
    m = doc["losses"]["meter"]
    metered = sum(g["parameters"]["metered_kwh"] for g in gaps)
    assert m["without_inverter_data_kwh"] >= metered * 0.97
    assert m["shaped_kwh"] >= metered * 0.97


def test_meter_block_reconciles_with_the_ledger(whole):
    """Ledger rule (our own design, common practice for a ledger): delivered = inverters -
    AC losses - inverter energy without a meter reading + meter energy without inverter
    data, on any window; the months' reconciliation adds up to the period's."""
    doc, _, _ = whole
    m = doc["losses"]["meter"]
    assert m["inverter_kwh"] == pytest.approx(doc["losses"]["measured_kwh"], abs=0.1)
    assert m["delivered_kwh"] == pytest.approx(
        m["inverter_kwh"] - m["ac_losses_kwh"] - m["not_metered_kwh"]
        + m["without_inverter_data_kwh"], abs=0.1)
    assert doc["metrics"]["period"]["delivered_kwh"] == pytest.approx(m["delivered_kwh"],
                                                                      abs=0.1)
    months = doc["metrics"]["monthly"]
    for key in ("inverter_kwh", "meter_kwh"):
        assert math.fsum(x["meter"][key] for x in months) == \
            pytest.approx(doc["metrics"]["period"]["meter"][key], abs=0.1 * len(months))
    assert doc["metrics"]["period"]["meter"]["inverter_kwh"] - \
        doc["metrics"]["period"]["meter"]["meter_kwh"] == pytest.approx(m["ac_losses_kwh"],
                                                                       abs=0.1)


def test_without_a_meter_the_plant_is_its_inverters(demo_db, tmp_path):
    """The same plant read with basis = "inverters": the plant's PR is the inverters' again
    (sum of their energy over the reference yield), the meter still reconciled."""
    text = (demo_db.logs / "site.toml").read_text(encoding="utf-8")
    text = text.replace("[meter]\n", '[meter]\nbasis = "inverters"\n', 1)
    (tmp_path / "site.toml").write_text(text, encoding="utf-8")
    site = load_site(tmp_path / "site.toml")
    assert not meter.load_settings(site).at_meter
    con = demo_db.connect()
    try:
        start, end = metrics.resolve_period(con, site, None, None)
        stored = analysis.current(con)
        at_meter = analysis.view(con, demo_db.site, start, end, stored)
        doc = analysis.view(con, site, start, end, stored)
    finally:
        con.close()
    p = doc["metrics"]["period"]
    assert doc["losses"]["meter"]["basis"] == "inverters"
    assert "at the inverters" in doc["settings"]["plant_basis"]
    inv = sum(i["measured_kwh"] for i in p["inverters"])
    assert p["measured_kwh"] == pytest.approx(inv, abs=0.5)
    assert p["pr"] > at_meter["metrics"]["period"]["pr"]
    assert "meter" in p  # the reconciliation is still shown


def test_check_text_says_the_basis_and_the_way_to_the_meter(whole, demo_db):
    """`perfcheck check` without --json: the basis in words and delivered = inverters - AC
    losses - not metered + metered without inverter data, in kWh as the JSON has them."""
    doc, _, _ = whole
    lines = format_table(doc, demo_db.site).splitlines()
    basis = [x for x in lines if x.startswith("Plant basis: ")]
    assert basis == [f"Plant basis: {doc['settings']['plant_basis']}"]
    way = [x for x in lines if x.startswith("At the export meter: ")]
    m = doc["losses"]["meter"]
    assert len(way) == 1 and f"delivered {report.kwh(m['delivered_kwh'])} kWh" in way[0]
    assert f"AC losses {report.kwh(m['ac_losses_kwh'])}" in way[0]
    for code in ("None", "e+", "True", "energy_register"):
        assert code not in "\n".join(basis + way), code
