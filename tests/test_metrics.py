"""Metrics: IEC 61724-1 yields and PR, weather-corrected PR, EPI, availability, coverage, CIs."""

from __future__ import annotations

import datetime as dt

import duckdb
import numpy as np
import pandas as pd
import pytest
from metrics_support import connect_with, make_site, synthetic_aligned, utc
from numpy.testing import assert_allclose

from perfcheck import db, metrics, periods
from perfcheck.errors import SiteFileError


def _hand_rows(site) -> pd.DataFrame:
    """Two invented hours on 15 June 2025 at the 100 kWp inverter WR1 (gamma -0.4 %/C)."""
    base = synthetic_aligned(site, "2025-06-15 10:00", "2025-06-15 12:00", freq="1h")
    return base.assign(
        measured_ac_w=[64_000.0, 50_000.0],  # 64 kWh and 50 kWh in the two hours
        expected_ac_w=[60_000.0, 50_000.0],
        poa_wm2=[800.0, 600.0],
        temp_cell_c=[50.0, 40.0],
        temp_module_c=[50.0, 40.0],  # the same, so both temperature bases give the example
        sun_zenith_deg=[35.0, 33.0],
    )


def _hand_metrics(extra: dict) -> dict:
    site = make_site(metrics={"min_coverage": 0.0, **extra})
    con = connect_with(_hand_rows(site))
    start, end = periods.day_period(site, dt.date(2025, 6, 15), dt.date(2025, 6, 15))
    return metrics.period(con, site, start, end)["metrics"]["period"]


def test_hand_worked_iec_61724_example():
    # IEC 61724-1 definitions (REFERENCES.md, D: derived from the standard's formulas):
    # H = 0.8 + 0.6 = 1.4 kWh/m2 -> Yr = 1.4 h; E = 64 + 50 = 114 kWh -> Yf = 114/100 = 1.14 h;
    # PR = 1.14 / 1.4 = 0.814286.
    # T_ref 25 C: C = 1 - 0.004 (50 - 25) = 0.90 and 1 - 0.004 (40 - 25) = 0.94;
    #   PR' = 114 / (100 (0.8 0.90 + 0.6 0.94)) = 114 / 128.4 = 0.887850.
    # T_cell_typ_avg 35 C (Dierauf et al. 2013, NREL/TP-5200-57991, same formula with
    #   delta = 100 gamma): C = 0.94 and 0.98; 114 / (75.2 + 58.8) = 114 / 134 = 0.850746.
    # EPI = 114 / (60 + 50) = 1.036364.
    p = _hand_metrics({"t_cell_typ_avg_c": 35.0})
    # tolerance: the document rounds to 7 significant digits
    assert_allclose(p["yr_h"], 1.4, rtol=1e-6)
    assert_allclose(p["yf_h"], 1.14, rtol=1e-6)
    assert_allclose(p["pr"], 114 / 140, rtol=1e-6)
    assert_allclose(p["pr"], 0.81429, atol=5e-6)
    assert_allclose(p["pr_temp_corrected"], 0.88785, atol=5e-6)
    assert_allclose(p["pr_weather_corrected"], 0.85075, atol=5e-6)
    assert_allclose(p["epi"], 114 / 110, rtol=1e-6)
    assert_allclose(p["measured_kwh"], 114.0, rtol=1e-6)
    assert p["ya_h"] is None  # no DC measured


def test_temperature_corrected_pr_identity_at_weighted_mean_temperature():
    # REFERENCES.md (D, from the IEC 61724-1 formula): with T_ref = sum(G T)/sum(G)
    # = (800 50 + 600 40) / 1400 = 45.714 C the corrected PR equals the plain PR.
    t_ref = (800 * 50 + 600 * 40) / 1400
    p = _hand_metrics({"pr_temp_ref_c": 35.0, "t_cell_typ_avg_c": t_ref})
    assert_allclose(p["pr_weather_corrected"], p["pr"], rtol=1e-6)
    assert_allclose(p["pr_temp_corrected"], 0.85075, atol=5e-6)  # T_ref 35 C, as above


def _basis_metrics(basis: str, temp_module: list[float]) -> dict:
    site = make_site(metrics={"min_coverage": 0.0, "pr_temp_basis": basis})
    rows = _hand_rows(site).assign(temp_cell_c=[52.4, 41.8], temp_module_c=temp_module)
    start, end = periods.day_period(site, dt.date(2025, 6, 15), dt.date(2025, 6, 15))
    return metrics.period(connect_with(rows), site, start, end)["metrics"]["period"]


def test_temperature_basis_module_or_cell():
    # The REFERENCES.md example (D, IEC 61724-1 formula) with T = [50, 40] C as the measured
    # back-of-module temperature; the cell temperature is T_mod + 3 G/1000 = [52.4, 41.8] C
    # (SAPM open rack, King et al. 2004 eq. 12). Module basis (IEC 61724-1's form, default):
    # PR' = 0.887850 as in the example. Cell basis: C = 1 - 0.004 (52.4 - 25) = 0.8904 and
    # 1 - 0.004 (41.8 - 25) = 0.9328; PR' = 114 / (100 (0.8 0.8904 + 0.6 0.9328)) = 114 /
    # 127.2 = 0.896226 (hand arithmetic), about 0.9 % higher.
    assert_allclose(_basis_metrics("module", [50.0, 40.0])["pr_temp_corrected"], 0.88785,
                    atol=5e-6)
    assert_allclose(_basis_metrics("cell", [50.0, 40.0])["pr_temp_corrected"], 0.896226,
                    atol=5e-6)
    # No module temperature measured: the module basis takes the cell temperature less the
    # SAPM difference of the site's open-rack glass/polymer array, 3 C at 1000 W/m2 (King et
    # al. 2004, table 1): [52.4 - 2.4, 41.8 - 1.8] = [50, 40] C, the example again.
    assert_allclose(_basis_metrics("module", [np.nan, np.nan])["pr_temp_corrected"], 0.88785,
                    atol=5e-6)


def test_array_yield_and_losses_where_dc_is_measured():
    # IEC 61724-1: Ya = E_DC / P0, L_C = Yr - Ya, L_S = Ya - Yf. DC 70 + 55 = 125 kWh
    # -> Ya 1.25 h, L_C = 1.4 - 1.25 = 0.15 h, L_S = 1.25 - 1.14 = 0.11 h (hand arithmetic).
    site = make_site(metrics={"min_coverage": 0.0})
    rows = _hand_rows(site)
    con = connect_with(rows)
    # the readings of the data contract, as ingest presents them: (ts, quantity, device, value,
    # file_id, line); this in-memory database holds only the two DC values
    dc = pd.DataFrame({"ts": rows["ts"], "quantity": "dc_power_w", "device": "WR1",
                       "value": [70_000.0, 55_000.0], "file_id": 1, "line": [1, 2]})
    con.register("_dc", dc)
    con.execute("CREATE OR REPLACE VIEW readings AS SELECT * FROM _dc")
    start, end = periods.day_period(site, dt.date(2025, 6, 15), dt.date(2025, 6, 15))
    p = metrics.period(con, site, start, end)["metrics"]["period"]
    assert_allclose([p["ya_h"], p["lc_h"], p["ls_h"]], [1.25, 0.15, 0.11], rtol=1e-5)


def test_weather_corrected_pr_removes_the_seasonal_swing():
    # Dierauf et al. 2013, NREL/TP-5200-57991: the weather-corrected PR is designed so that a
    # healthy system's monthly values do not swing with the seasons as the plain PR does, and
    # so that over the year of T_cell_typ_avg it equals the plain PR.
    site = make_site()
    con = connect_with(synthetic_aligned(site, "2025-01-01", "2026-01-01", freq="1h",
                                         noise=0.0))
    start, end = metrics.resolve_period(con, site, None, None)
    m = metrics.period(con, site, start, end)["metrics"]
    full = [r for r in m["monthly"] if r["days"] >= 28 and r["pr"] is not None]
    plain = np.array([r["pr"] for r in full])
    corrected = np.array([r["pr_weather_corrected"] for r in full])
    assert len(full) >= 11
    assert np.ptp(plain) > 0.03  # the swing is there (gamma -0.4 %/C, ~30 C of seasons)
    assert np.ptp(corrected) < 0.1 * np.ptp(plain)
    year = m["yearly"][0] if m["yearly"][0]["days"] >= 364 else m["yearly"][1]
    assert_allclose(year["pr_weather_corrected"], year["pr"], rtol=2e-3)


def test_bootstrap_interval_covers_the_truth_at_the_nominal_rate():
    # Repeated-sampling check of the percentile bootstrap (Efron & Tibshirani 1993, ch. 13):
    # 400 invented 30-day months with true ratio 0.80; a 95 % interval should contain the truth
    # in about 95 % of them (binomial sd 1.1 %; the percentile interval runs a little short at
    # n = 30, so 0.90 to 0.985 is accepted).
    rng = np.random.default_rng(2024)
    hits = 0
    trials = 400

    def ratio(x):
        return (x[..., 0] / x[..., 1])[..., None]

    for _ in range(trials):
        ref = rng.uniform(200.0, 800.0, 30)
        energy = ref * rng.normal(0.80, 0.04, 30)
        lo, hi = metrics.block_bootstrap(np.column_stack([energy, ref]), ratio, 400, 0.95,
                                         rng)
        hits += lo[0] <= 0.80 <= hi[0]
    assert 0.90 <= hits / trials <= 0.985


def test_monthly_intervals_contain_the_synthetic_truth_and_are_seeded():
    site = make_site(n_inverters=2)
    frame = synthetic_aligned(site, "2025-05-01", "2025-07-01", performance=0.85 * 0.97,
                              noise=0.03)
    con = connect_with(frame)
    start, end = metrics.resolve_period(con, site, None, None)
    a = metrics.period(con, site, start, end)["metrics"]
    b = metrics.period(con, site, start, end)["metrics"]
    assert a == b  # seeded: identical reruns
    # the UTC data reach two hours into July (local): that month is reported as too thin
    assert [r["month"] for r in a["monthly"]] == ["2025-05", "2025-06", "2025-07"]
    assert a["monthly"][2]["pr"] is None and a["monthly"][2]["reason"].startswith("coverage")
    for row in a["monthly"][:2]:
        assert row["epi_ci_low"] <= 0.97 <= row["epi_ci_high"]  # true EPI 0.97 (invented)
        assert row["pr_ci_low"] < row["pr"] < row["pr_ci_high"]
        assert row["inverters"][0]["scope"] == "inverter:WR1"
    other = make_site(n_inverters=2, metrics={"seed": 7})
    c = metrics.period(con, other, start, end)["metrics"]
    assert c["monthly"][0]["pr_ci_low"] != a["monthly"][0]["pr_ci_low"]
    assert c["monthly"][0]["pr"] == a["monthly"][0]["pr"]


def test_irradiance_uncertainty_is_added_in_quadrature():
    # GUM (JCGM 100:2008) 5.1.2, uncorrelated inputs: half-widths add in quadrature.
    lo, hi = metrics.combine_band(1.0, 0.97, 1.04, 0.03)
    assert_allclose([lo, hi], [1 - np.hypot(0.03, 0.03), 1 + np.hypot(0.04, 0.03)], rtol=1e-12)
    site = make_site()
    con = connect_with(synthetic_aligned(site, "2025-06-01", "2025-07-01"))
    start, end = metrics.resolve_period(con, site, None, None)
    narrow = metrics.period(con, site, start, end)["metrics"]["period"]  # class A default
    wide = metrics.period(con, make_site(model={"poa_uncertainty_pct": 10.0}), start, end)
    p = wide["metrics"]["period"]
    assert p["pr_ci_high"] - p["pr_ci_low"] > narrow["pr_ci_high"] - narrow["pr_ci_low"]
    assert p["pr_ci_high"] - p["pr"] >= 0.10 * p["pr"] * 0.999
    assert wide["settings"]["poa_uncertainty_source"] == "site file model.poa_uncertainty_pct"
    assert narrow["availability_ci_low"] == narrow["availability_ci_high"] == 1.0


def test_modelled_irradiance_uncertainty_from_the_decomposition():
    # Irradiance modelled from GHI: the GHI sensor's calibration and the decomposition's DNI
    # bias carried by the transposition (c, summed linearly: a bias over the period) are
    # independent and add in quadrature (JCGM 100:2008, GUM, 5.1.2); the sensor's share adds
    # linearly, and so does the range over the beam cut at low sun (R: a limit, from an
    # estimate at the range's end; common practice for a bound, no source). Sums invented: all
    # from the sensor; all modelled with |C| = 0.4 H; 40 % from the sensor, the rest modelled
    # with C = 0.3 H; the last again with |R| = 0.05 H.
    u = metrics.irradiance_uncertainty([1000.0] * 4, [1000.0, 0.0, 400.0, 400.0],
                                       [0.0, -400.0, 300.0, 300.0], [0.0, 0.0, 0.0, -50.0],
                                       0.03, 0.10)
    third = (0.03 * 400 + np.hypot(0.03 * 600, 0.10 * 300)) / 1000
    assert_allclose(u, [0.03, np.hypot(0.03, 0.04), third, third + 0.05], rtol=1e-12)
    # through the stored sums: a plant without a plane-of-array sensor whose plane gains 0.4
    # of its irradiance per relative change of DNI gets at least that half-width
    site = make_site(n_inverters=2)
    frame = synthetic_aligned(site, "2025-06-01", "2025-07-01")
    frame = frame.assign(poa_source="model", poa_dni_sensitivity_wm2=0.4 * frame["poa_wm2"])
    con = connect_with(frame)
    start, end = metrics.resolve_period(con, site, None, None)
    p = metrics.period(con, site, start, end)["metrics"]["period"]
    half = np.hypot(0.03, 0.10 * 0.4) * p["pr"]
    assert p["pr_ci_high"] - p["pr"] >= half * 0.999
    assert p["pr_ci_high"] - p["pr"] < half * 1.5
    # and a range over the cut beam of 0.1 of the irradiance adds 0.1 PR linearly
    con = connect_with(frame.assign(poa_beam_range_wm2=0.1 * frame["poa_wm2"]))
    q = metrics.period(con, site, start, end)["metrics"]["period"]
    assert q["pr"] == p["pr"]
    assert q["pr_ci_high"] - q["pr"] >= (half + 0.1 * p["pr"]) * 0.999


def test_coverage_below_the_minimum_gives_null_and_a_reason():
    site = make_site()
    frame = synthetic_aligned(site, "2025-06-01", "2025-07-01")
    gap = (frame["ts"] >= utc("2025-06-05")) & (frame["ts"] < utc("2025-06-15"))
    con = connect_with(frame[~gap])
    start, end = metrics.resolve_period(con, site, None, None)
    m = metrics.period(con, site, start, end)["metrics"]
    june = m["monthly"][0]
    # 10 of 30 days missing: coverage about 20/30 (day lengths differ a little)
    assert_allclose(june["coverage"], 20 / 30, atol=0.01)
    assert june["pr"] is None and june["epi"] is None and june["pr_ci_low"] is None
    assert june["reason"].startswith("coverage 0.66")
    days = {r["date"]: r for r in m["daily"]}
    assert days["2025-06-07"]["coverage"] == 0 and days["2025-06-07"]["pr"] is None
    assert days["2025-06-20"]["pr"] is not None


def test_flagged_rows_are_not_valid():
    site = make_site(metrics={"exclude_flags": ["stuck"]})
    frame = synthetic_aligned(site, "2025-06-01", "2025-06-03")
    day = frame[(frame["ts"] >= utc("2025-06-02")) & (frame["sun_zenith_deg"] < 90)]
    flags = pd.DataFrame({"ts": day["ts"], "quantity": "poa_wm2", "device": "site",
                          "flag": "stuck"})
    con = connect_with(frame, flags)
    start, end = metrics.resolve_period(con, site, None, None)
    days = {r["date"]: r for r in metrics.period(con, site, start, end)["metrics"]["daily"]}
    assert days["2025-06-02"]["valid_intervals"] == 0
    assert days["2025-06-01"]["valid_intervals"] == days["2025-06-01"]["daylight_intervals"]


def test_availability_time_and_energy_and_the_exclusion_rule():
    site = make_site(n_inverters=2)
    frame = synthetic_aligned(site, "2025-06-01", "2025-07-01")
    down = ((frame["inverter_id"] == "WR2") & (frame["ts"] >= utc("2025-06-10 06:00"))
            & (frame["ts"] < utc("2025-06-11 06:00")))
    frame.loc[down, "measured_ac_w"] = 0.0
    con = connect_with(frame)
    start, end = metrics.resolve_period(con, site, None, None)
    wr2 = metrics.period(con, site, start, end)["metrics"]["monthly"][0]["inverters"][1]
    # by hand from the frame: base = daylight rows with POA >= 50 W/m2 (metrics rules)
    f = frame[(frame["inverter_id"] == "WR2") & (frame["sun_zenith_deg"] < 90)
              & (frame["poa_wm2"] >= 50)]
    lost = down.loc[f.index]
    assert_allclose(wr2["availability"], 1 - lost.sum() / len(f), rtol=1e-6)
    assert_allclose(wr2["availability_energy"],
                    1 - f.loc[lost, "expected_ac_w"].sum() / f["expected_ac_w"].sum(), rtol=1e-6)
    events = [{"kind": "curtailment", "scope": "inverter:WR2",
               "start": "2025-06-10T08:00:00+02:00", "end": "2025-06-11T08:00:00+02:00"}]
    windows = metrics.event_windows(events, metrics.load_settings(site))
    excl = metrics.period(con, site, start, end, windows)["metrics"]["monthly"][0]
    assert excl["inverters"][1]["availability"] == 1.0
    assert excl["inverters"][1]["excluded_intervals"] > 0
    assert excl["inverters"][0]["excluded_intervals"] == 0
    # grid outages are kept unless asked for (a plant stop cannot be told from a grid outage)
    plant_stop = [{"kind": "outage", "scope": "plant", "start": events[0]["start"],
                   "end": events[0]["end"]}]
    assert metrics.event_windows(plant_stop, metrics.load_settings(site)).empty
    grid = make_site(n_inverters=2, metrics={"exclude_grid_outages": True})
    assert len(metrics.event_windows(plant_stop, metrics.load_settings(grid))) == 1


def test_plant_reference_yield_is_p0_weighted_over_orientations():
    # Plant PR = sum E / sum(P0_i H_i / G_STC): the P0-weighted plane-of-array irradiation
    # (IEC 61724-1 for a plant with several planes; the rule this project states).
    site = make_site(n_inverters=2, tilts=[30.0, 10.0])
    frame = synthetic_aligned(site, "2025-06-01", "2025-06-08")
    wr2 = frame["inverter_id"] == "WR2"
    frame.loc[wr2, "poa_wm2"] *= 0.9
    con = connect_with(frame)
    start, end = metrics.resolve_period(con, site, None, None)
    p = metrics.period(con, site, start, end)["metrics"]["period"]
    day = frame[frame["sun_zenith_deg"] < 90]
    h = day.groupby("inverter_id")["poa_wm2"].sum() * 0.25  # Wh/m2 at 15 min
    e = day["measured_ac_w"].sum() * 0.25
    assert_allclose(p["pr"], e / (100_000 * h.sum() / 1000), rtol=1e-6)
    assert_allclose(p["yr_h"], h.mean() / 1000, rtol=1e-6)


@pytest.mark.parametrize(
    ("metrics_table", "message"),
    [
        ({"min_coverge": 0.5}, "hollerbach.toml: metrics.min_coverge: unknown key"),
        ({"min_coverage": "high"}, "hollerbach.toml: metrics.min_coverage: expected a number, "
                                   "got str 'high'"),
        ({"min_coverage": 1.5}, "hollerbach.toml: metrics.min_coverage: 1.5 is outside the "
                                "range 0 to 1"),
        ({"pr_temp_ref_c": "hot"}, "hollerbach.toml: metrics.pr_temp_ref_c: expected a "
                                   "temperature in C or 'annual', got 'hot'"),
        ({"exclude_flags": ["stuck", "odd"]}, "hollerbach.toml: metrics.exclude_flags[1]: "
                                              "'odd' is not one of"),
        ({"bootstrap_samples": 5}, "hollerbach.toml: metrics.bootstrap_samples: 5 is outside"),
        ({"pr_temp_basis": "back"}, "hollerbach.toml: metrics.pr_temp_basis: 'back' is not one "
                                    "of"),
    ],
)
def test_metrics_section_errors_name_the_key(metrics_table, message):
    site = make_site(metrics=metrics_table)
    with pytest.raises(SiteFileError) as exc:
        metrics.load_settings(site)
    assert str(exc.value).startswith(message)


def test_annual_reference_temperature_option():
    # with the cell-temperature basis, T_ref = T_cell_typ_avg makes the corrected PR the
    # weather-corrected one (Dierauf et al. 2013 with delta = 100 gamma)
    site = make_site(metrics={"pr_temp_ref_c": "annual", "pr_temp_basis": "cell"})
    con = connect_with(synthetic_aligned(site, "2025-06-01", "2025-06-11"))
    start, end = metrics.resolve_period(con, site, None, None)
    out = metrics.period(con, site, start, end)
    p = out["metrics"]["period"]
    assert p["pr_temp_corrected"] == p["pr_weather_corrected"]
    assert out["settings"]["pr_temp_ref_used_c"] == out["settings"]["t_cell_typ_avg_used_c"]


# --------------------------------------------------------------------------------------------
# the demo plant (invented scenario, shared session database from conftest.py)


def _healthy_demo_months(logs) -> list[str]:
    """Months the demo's truth files call healthy: injected fault losses (degradation aside)
    below 1 % of the clean energy and no sensor fault, clock fault or data gap in the month."""
    import json

    truth = json.loads((logs / "truth.json").read_text())
    daily = pd.read_csv(logs / "truth_daily.csv")
    daily["month"] = daily["date"].str[:7]
    loss = [c for c in daily.columns if c.startswith("loss_") and c != "loss_degradation_kwh"]
    month = daily.groupby("month")[["clean_energy_kwh", *loss]].sum()
    share = month[loss].sum(axis=1) / month["clean_energy_kwh"]
    tz = "Europe/Vienna"
    spoiled = set()
    for f in truth["faults"]:
        if f["kind"] in ("sensor_fault", "clock_fault", "data_gap"):
            first = pd.Timestamp(f["start"]).tz_convert(tz).strftime("%Y-%m")
            last = pd.Timestamp(f["end"]).tz_convert(tz).strftime("%Y-%m")
            spoiled.update(str(p) for p in pd.period_range(first, last, freq="M"))
    return [m for m in share.index if share[m] < 0.01 and m not in spoiled]


@pytest.fixture(scope="module")
def demo_metrics(demo_db):
    con = demo_db.connect()
    try:
        start, end = metrics.resolve_period(con, demo_db.site, None, None)
        yield metrics.period(con, demo_db.site, start, end)["metrics"]
    finally:
        con.close()


def test_healthy_demo_months_have_ordinary_pr_and_epi(demo_db, demo_metrics):
    # PR 0.75-0.90: common practice for a well-run crystalline-silicon system (no source),
    # raised by 0.02 for the demo's bifacial block: its rear light (some 5-10 % of the front
    # at a bifaciality of 0.7, common practice) is outside the front-irradiance reference
    # yield, and the block holds a quarter of the DC rating (48 of 202 kWp).
    # EPI 0.97-1.03: the model should explain a healthy month to within a few percent.
    healthy = _healthy_demo_months(demo_db.logs)
    assert len(healthy) >= 6
    rows = {r["month"]: r for r in demo_metrics["monthly"]}
    for month in healthy:
        r = rows[month]
        assert 0.75 <= r["pr"] <= 0.92, (month, r["pr"])
        assert 0.97 <= r["epi"] <= 1.03, (month, r["epi"])
        assert r["coverage"] >= 0.9


def test_demo_outage_month_shows_in_availability(demo_db, demo_metrics):
    # truth.json: inverter inv2 off from 18 April 2025 10:35 to 19 April 16:20
    april = {r["month"]: r for r in demo_metrics["monthly"]}["2025-04"]
    inv2 = next(r for r in april["inverters"] if r["scope"] == "inverter:inv2")
    others = [r["availability"] for r in april["inverters"] if r["scope"] != "inverter:inv2"]
    assert inv2["availability"] < 0.97 < min(others)
    assert inv2["availability_energy"] < 0.97


def _sensor_week(bias) -> tuple[dict, dict, dict, pd.DataFrame, pd.Series]:
    """Metrics of an invented June with a week in which the POA sensor reads 10 % low:
    fault-free, biased (``bias(frame, week)`` applied to the week's rows), and biased with
    that week declared a sensor fault. Returns healthy, biased, fixed, the frame, the week."""
    site = make_site()
    frame = synthetic_aligned(site, "2025-06-01", "2025-07-01")
    # the modelled POA's sensitivity to the decomposition (invented: 0.3 of it)
    frame["poa_dni_sensitivity_wm2"] = 0.3 * frame["poa_modelled_wm2"]
    week = (frame["ts"] >= utc("2025-06-10")) & (frame["ts"] < utc("2025-06-17"))
    truth = connect_with(frame)
    frame.loc[week, "poa_wm2"] *= 0.9
    bias(frame, week)
    con = connect_with(frame)
    start, end = metrics.resolve_period(con, site, None, None)
    healthy = metrics.period(truth, site, start, end)["metrics"]["period"]
    biased = metrics.period(con, site, start, end)["metrics"]["period"]
    event = [{"kind": "sensor_fault", "scope": "plant", "start": "2025-06-10T02:00:00+02:00",
              "end": "2025-06-17T02:00:00+02:00"}]
    windows = metrics.event_windows(event, metrics.load_settings(site))
    fixed = metrics.period(con, site, start, end, windows)["metrics"]["period"]
    return healthy, biased, fixed, frame, week


def test_sensor_fault_window_falls_back_to_modelled_irradiance():
    # invented fault: the POA sensor reads 10 % low for a week; the modelled POA is right
    healthy, biased, fixed, _, _ = _sensor_week(lambda frame, week: None)
    assert biased["pr"] > healthy["pr"] * 1.01
    assert_allclose(fixed["pr"], healthy["pr"], rtol=1e-6)
    assert fixed["model_poa_intervals"] > 0 and biased["model_poa_intervals"] == 0
    # the modelled share carries the decomposition's uncertainty besides the sensor's
    assert fixed["pr_ci_high"] - fixed["pr_ci_low"] > healthy["pr_ci_high"] - healthy["pr_ci_low"]


def test_sensor_fault_window_takes_the_expected_power_from_the_modelled_poa():
    # Synthetic truth (invented fault): for a week the POA sensor reads 10 % low, and so do
    # the expected power built from it (expected and potential x 0.9, AC limit kept) and the
    # cell temperature modelled from it (the generator's T_air + 25 C x POA / 1000); the
    # values from the modelled POA are the true ones. Inside the detected window the EPI,
    # energy-based availability, reference yield and temperature-corrected PR must be those of
    # the fault-free data (exactly: the same sums), and the result says how much came from
    # the model.
    def bias(frame, week):
        frame.loc[week, "potential_ac_w"] *= 0.9
        frame.loc[week, "expected_ac_w"] = np.minimum(frame.loc[week, "potential_ac_w"],
                                                      90_000.0)
        frame.loc[week, "temp_cell_c"] = (frame.loc[week, "temp_air_c"]
                                          + frame.loc[week, "poa_wm2"] / 1000.0 * 25.0)

    healthy, biased, fixed, frame, week = _sensor_week(bias)
    assert biased["epi"] > healthy["epi"] * 1.015  # a week of 30 days 10 % low: about 2 %
    for k in ("epi", "pr", "pr_temp_corrected", "availability_energy", "expected_kwh"):
        assert_allclose(fixed[k], healthy[k], rtol=1e-9)
    inside = week & (frame["sun_zenith_deg"] < 90)
    want_kwh = (frame.loc[inside, "expected_ac_modelled_w"] * 0.25).sum() / 1000.0
    assert_allclose(fixed["model_poa_expected_kwh"], want_kwh, rtol=1e-6)
    assert biased["model_poa_expected_kwh"] == 0


def test_daily_sums_in_pieces_of_whole_days_are_the_sums_of_one_query(monkeypatch):
    # the query run in pieces cut at local midnights (across both daylight-saving changes of
    # Europe/Berlin) gives each day's sums exactly as one query over the whole period does
    # (common practice: a day's rows are all in one piece)
    site = make_site()
    con = connect_with(synthetic_aligned(site, "2025-01-01", "2026-01-01", freq="1h"))
    start, end = utc("2024-12-31 23:00"), utc("2025-12-31 23:00")
    settings = metrics.load_settings(site)
    monkeypatch.setattr(metrics, "shortest_interval", lambda con: 3600.0)
    whole = metrics.daily_sums(con, site, start, end, settings)
    monkeypatch.setattr(metrics, "DAILY_PIECE_ROWS", 24 * 10 * len(site.inverters))
    assert len(metrics._day_pieces(site, start, end, 3600.0)) == 37
    pd.testing.assert_frame_equal(metrics.daily_sums(con, site, start, end, settings), whole)


def test_daily_sums_failing_inside_a_transaction_raises_its_own_error(monkeypatch):
    # a query that fails inside a transaction aborts it, and DuckDB then refuses every other
    # statement, the unregistering of the query's frames too: the error raised must be the
    # query's own (an out-of-memory error on a large site, forced here by DuckDB's error()),
    # not "Current transaction is aborted" (common practice: report the first failure)
    site = make_site()
    con = connect_with(synthetic_aligned(site, "2025-06-15", "2025-06-16", freq="1h"))
    start, end = utc("2025-06-14 22:00"), utc("2025-06-15 22:00")
    settings = metrics.load_settings(site)
    sql = db.sql
    monkeypatch.setattr(db, "sql", lambda name: "SELECT error('Out of Memory Error: forced') "
                        f"FROM ({sql(name)})" if name == "metrics_daily" else sql(name))
    with pytest.raises(duckdb.Error, match="forced"), db.transaction(con):
        metrics.daily_sums(con, site, start, end, settings)
    # the rollback dropped the frames: the names are free for the next call
    monkeypatch.setattr(db, "sql", sql)
    assert len(metrics.daily_sums(con, site, start, end, settings)) == len(site.inverters)
