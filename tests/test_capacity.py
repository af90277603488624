"""Capacity test: ASTM E2848 regression, ASTM E2939 reporting conditions, CLI and JSON."""

from __future__ import annotations

import json

import jsonschema
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from metrics_support import connect_with, make_site, synthetic_aligned, write_site
from numpy.testing import assert_allclose

from perfcheck import capacity, metrics
from perfcheck.cli import main
from perfcheck.errors import DataError

# REFERENCES.md (D, derived from the ASTM E2848 regression form, from memory): with P in kW and
# E in W/m2, a = (0.1, -1e-5, -3e-4, 2e-4) gives P(800 W/m2, 20 C, 3 m/s)
# = 800 (0.1 - 0.008 - 0.006 + 0.0006) = 69.28 kW.
A_TRUE = np.array([0.1, -1e-5, -3e-4, 2e-4])
RC = {"poa_wm2": 800.0, "temp_air_c": 20.0, "wind_speed_ms": 3.0}


def _points(n: int, seed: int, noise_kw: float):
    rng = np.random.default_rng(seed)
    e = rng.uniform(600, 1000, n)
    t = rng.uniform(10, 35, n)
    v = rng.uniform(0, 6, n)
    p = capacity.e2848_design(e, t, v) @ A_TRUE + noise_kw * rng.standard_normal(n)
    return e, t, v, p


def test_regression_recovers_noise_free_coefficients():
    e, t, v, p = _points(60, 1, 0.0)
    fit = capacity.fit_e2848(e, t, v, p)
    assert_allclose(fit.params, A_TRUE, rtol=1e-8)  # exact data: exact fit (float rounding)
    assert_allclose(capacity.capacity_at(fit, RC)["value"], 69.28, rtol=1e-10)


def test_regression_recovers_coefficients_within_their_standard_errors():
    # With noise (0.4 kW, invented) every coefficient lies within 3 standard errors of the
    # truth, and the 95 % interval of the mean prediction at RC contains 69.28 kW.
    e, t, v, p = _points(200, 7, 0.4)
    fit = capacity.fit_e2848(e, t, v, p)
    assert np.all(np.abs(fit.params - A_TRUE) < 3 * fit.bse)
    cap = capacity.capacity_at(fit, RC)
    assert cap["low"] < 69.28 < cap["high"]
    assert cap["high"] - cap["low"] < 1.0


def test_prediction_interval_covers_at_the_nominal_rate():
    # Repeated sampling: the 95 % interval of the mean (OLS, normal errors) should contain the
    # truth in about 95 % of 300 samples (binomial sd 1.3 %).
    hits = 0
    for seed in range(300):
        fit = capacity.fit_e2848(*_points(60, 1000 + seed, 0.5))
        cap = capacity.capacity_at(fit, RC)
        hits += cap["low"] <= 69.28 <= cap["high"]
    assert 0.91 <= hits / 300 <= 0.985


def test_reporting_conditions_match_a_hand_computation():
    # ASTM E2939 rule as implemented (from memory): irradiance = 60th percentile of the points
    # at or above 400 W/m2, temperature and wind = their means. By hand: points >= 400 are
    # 420, 500, 610, 700, 800, 900; linear percentile position 0.6 (6 - 1) = 3 -> 700 W/m2;
    # temperatures (18 + 20 + 22 + 24 + 26 + 28) / 6 = 23.0 C; wind (1 + 2 + 3 + 3 + 2 + 1) / 6
    # = 2.0 m/s. The 350 W/m2 point (10 C, 9 m/s) is left out.
    poa = pd.Series([350.0, 420, 500, 610, 700, 800, 900])
    temp = pd.Series([10.0, 18, 20, 22, 24, 26, 28])
    wind = pd.Series([9.0, 1, 2, 3, 3, 2, 1])
    rc = capacity.reporting_conditions(poa, temp, wind, capacity.CapacitySettings())
    assert_allclose([rc["poa_wm2"], rc["temp_air_c"], rc["wind_speed_ms"]], [700, 23, 2],
                    rtol=1e-12)


def _window(performance: float, **site_kwargs):
    site = make_site(n_inverters=2, **site_kwargs)
    frame = synthetic_aligned(site, "2025-06-01", "2025-06-22", performance=performance,
                              noise=0.01, cloudiness=0.5)
    return site, frame


def test_capacity_ratio_of_a_known_shortfall():
    # invented truth: measured = 0.96 x expected (performance 0.85 x 0.96 against 0.85),
    # measured with an irradiance sensor of stated 0.5 % calibration uncertainty (invented; a
    # class A sensor's 3 % would leave both guarantees inside the interval, see the next test)
    site, frame = _window(0.85 * 0.96, model={"poa_uncertainty_pct": 0.5})
    res = capacity.run_test(frame, site, guaranteed_ratio=0.95)
    r = res["result"]
    assert r["ratio_ci_low"] <= 0.96 <= r["ratio_ci_high"]
    assert_allclose(r["ratio"], 0.96, atol=0.003)
    assert r["passed"] and r["significant"]
    strict = capacity.run_test(frame, site, guaranteed_ratio=0.97)["result"]
    assert not strict["passed"] and strict["significant"]
    rules = [f["rule"] for f in res["filters"]]
    assert rules[:7] == ["intervals in the window", "valid and unflagged",
                         "daytime (irradiance above 0)", "all inverters running", "no clipping",
                         "no curtailment", "stable sky"]
    assert res["points"] >= 50


def test_a_biased_sensor_is_not_a_significant_fail():
    # Invented truth: a healthy plant (measured = expected with the true irradiance) logged by a
    # plane-of-array sensor reading 3 % high; the expected power is computed from the sensor's
    # irradiance, so it is 3 % high too (linear in irradiance, temperature effect of the bias
    # left out) and the ratio is 1/1.03 = 0.9709, not 1: the bias does not cancel. The sensor's
    # calibration uncertainty, 3 % for IEC 61724-1 class A (from memory), must carry the
    # interval up to the true ratio 1 (a 3 % bias is the edge of that sensor's 95 % band:
    # 0.9709 x 1.03 = 1.000), so a guarantee of 0.98 is failed but not significantly.
    site, frame = _window(0.85)
    frame["poa_wm2"] *= 1.03
    frame["expected_ac_w"] *= 1.03
    frame["potential_ac_w"] *= 1.03
    r = capacity.run_test(frame, site, guaranteed_ratio=0.98)["result"]
    assert_allclose(r["ratio"], 1 / 1.03, atol=0.003)
    assert r["irradiance_uncertainty_pct"] == 3.0
    assert r["ratio_ci_high"] >= 0.999
    assert not r["passed"] and not r["significant"]
    # the regressions alone would call it significant: that is the interval the sensor widens
    assert r["ratio_regression_ci_high"] < 0.98
    # relative half-width: sqrt(regression^2 + 0.03^2), at least the sensor's 3 % (GUM 5.1.6)
    assert r["ratio_ci_high"] / r["ratio"] - 1 >= 0.03


def test_filters_remove_clipping_curtailment_and_outages():
    site, frame = _window(0.85)
    frame.loc[frame["inverter_id"] == "WR2", "measured_ac_w"] = np.minimum(
        frame.loc[frame["inverter_id"] == "WR2", "measured_ac_w"], 60_000.0)
    down = (frame["inverter_id"] == "WR1") & (frame["ts"] < pd.Timestamp("2025-06-03", tz="UTC"))
    frame.loc[down, "measured_ac_w"] = 0.0
    windows = pd.DataFrame({"start_ts": [pd.Timestamp("2025-06-10", tz="UTC")],
                            "end_ts": [pd.Timestamp("2025-06-12", tz="UTC")]})
    res = capacity.run_test(frame, site, 0.97, rc=RC, curtailment=windows)
    counts = [f["points"] for f in res["filters"]]
    assert counts[3] < counts[2]  # outage of WR1 removed
    assert counts[5] < counts[4]  # curtailment window removed
    assert res["reporting_conditions"]["source"] == "given"
    # the limit at 60 kW is no clipping at the 90 kW rating: it stays and shows as a shortfall
    assert res["result"]["ratio"] < 0.97


def test_too_few_points_is_a_clear_error():
    site, frame = _window(0.85)
    short = frame[frame["ts"] < pd.Timestamp("2025-06-01 10:00", tz="UTC")]
    with pytest.raises(DataError) as exc:
        capacity.run_test(short, site, 0.97)
    assert str(exc.value).startswith("capacity test: only ")
    assert "(need 50)" in str(exc.value)


def test_capacity_cli_text_and_json_against_schema(tmp_path):
    site_path = write_site(tmp_path / "hollerbach.toml", n_inverters=2)
    site, frame = _window(0.85 * 0.96)
    connect_with(frame, path=tmp_path / "hollerbach.duckdb").close()
    out = tmp_path / "capacity.json"
    result = CliRunner().invoke(main, ["capacity", str(site_path), "--from", "2025-06-01",
                                       "--to", "2025-06-20", "--guaranteed-ratio", "0.95",
                                       "--json", str(out)])
    assert result.exit_code == 0, result.output
    assert "PASS" in result.output and "ASTM E2848" in result.output
    doc = json.loads(out.read_text())
    jsonschema.validate(doc, metrics.load_schema("capacity"))
    assert doc["result"]["passed"] is True
    assert doc["test"]["start"] == "2025-06-01T00:00:00+02:00"
    # --json -: the document alone on stdout, the text report on stderr
    piped = CliRunner().invoke(main, ["capacity", str(site_path), "--from", "2025-06-01",
                                      "--to", "2025-06-20", "--guaranteed-ratio", "0.95",
                                      "--json", "-"])
    assert piped.exit_code == 0, piped.output
    assert json.loads(piped.stdout)["result"] == doc["result"]
    assert "PASS" in piped.stderr and not (tmp_path / "-").exists()


def test_capacity_cli_errors(tmp_path):
    site_path = write_site(tmp_path / "hollerbach.toml", n_inverters=2)
    site, frame = _window(0.85)
    connect_with(frame, path=tmp_path / "hollerbach.duckdb").close()
    runner = CliRunner()
    r = runner.invoke(main, ["capacity", str(site_path), "--from", "2025-06-01", "--to",
                             "2025-06-20", "--rc-poa", "800"])
    assert r.exit_code == 2
    assert r.output.strip() == ("perfcheck: error: --rc-poa, --rc-temp and --rc-wind go "
                                "together: give all three or none")
    r = runner.invoke(main, ["capacity", str(site_path), "--from", "2025-06-01", "--to",
                             "2025-06-20", "--guaranteed-ratio", "1.7"])
    assert r.exit_code == 2
    assert "--guaranteed-ratio" in r.output


def test_capacity_on_the_demos_first_weeks(demo_db):
    # The invented demo plant is healthy in its first weeks (truth.json lists no fault before
    # October 2024 apart from design clipping): the ratio should be close to 1 and pass 0.97.
    site = demo_db.site
    con = demo_db.connect()
    try:
        start, end = metrics.resolve_period(con, site, pd.Timestamp("2024-05-01").date(),
                                            pd.Timestamp("2024-05-21").date())
        doc = capacity.run(con, site, start, end, guaranteed_ratio=0.97)
    finally:
        con.close()
    jsonschema.validate(doc, metrics.load_schema("capacity"))
    assert doc["result"]["passed"]
    assert 0.98 <= doc["result"]["ratio"] <= 1.02
    assert doc["points"] >= 50
