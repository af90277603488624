"""Guarantee and warranty findings against a hand-worked contract example.

The contract (invented): a 1 MWp plant, temperature-corrected PR guaranteed at 0.80 in contract
year 1 and 0.795 thereafter, availability 98 %, modules warranted to lose at most 2 % in year 1
and 0.55 %/yr thereafter, shortfall paid at 0.10 EUR/kWh, tests one-sided at 95 %.
"""

from __future__ import annotations

import copy

import pytest
from numpy.testing import assert_allclose
from report_fixtures import example_check, write_site

from perfcheck import guarantees
from perfcheck.errors import SiteFileError

YEAR1 = ("2024-04-01T00:00:00+02:00", "2025-04-01T00:00:00+02:00")


def contract_result(pr_tc=0.78, low=0.765, high=0.795, availability=0.95, rate=None):
    r = example_check(*YEAR1)
    p = r["metrics"]["period"]
    p.update(measured_kwh=1_200_000.0, expected_kwh=1_300_000.0, pr_temp_corrected=pr_tc,
             pr_temp_corrected_ci_low=low, pr_temp_corrected_ci_high=high,
             availability=availability)
    p.pop("availability_ci_low")
    p.pop("availability_ci_high")
    r["settings"]["confidence"] = 0.95
    if rate is not None:
        r["degradation"] = {"rate_pct_per_year": rate[0], "ci_low": rate[1], "ci_high": rate[2],
                            "method": "year-on-year", "ci_level": 0.95}
    return r


def test_performance_guarantee_hand_worked(tmp_path):
    site = write_site(tmp_path)
    found = guarantees.evaluate(site, contract_result())
    perf = found[0]
    # Hand computation (arithmetic of our own, normal approximation):
    # se = (0.795 - 0.765) / (2 * 1.959964) = 0.0076532
    # z = (0.78 - 0.80) / 0.0076532 = -2.6133
    # p = Phi(-2.6133) = 0.00449 (normal table: Phi(2.61) = 0.99547, Phi(2.62) = 0.99560)
    assert perf["promised"] == 0.80 and perf["contract_years"] == [1]
    assert_allclose(perf["z"], -2.6133, atol=1e-4)
    assert_allclose(perf["p_value"], 0.00449, atol=2e-5)
    assert perf["finding"] == "shortfall_shown"
    # energy short = 1 200 000 kWh * (0.80 / 0.78 - 1) = 30 769.23 kWh; at 0.10 EUR: 3 076.92
    # bounds from the interval: 0.80/0.795 - 1 -> 7 547.17 kWh, 0.80/0.765 - 1 -> 54 901.96 kWh
    assert_allclose(perf["energy_short_kwh"], 30769.23, atol=0.01)
    assert_allclose(perf["money_short"], 3076.92, atol=0.01)
    assert_allclose(perf["energy_short_kwh_low"], 7547.17, atol=0.01)
    assert_allclose(perf["energy_short_kwh_high"], 54901.96, atol=0.01)
    assert "not legal advice" in perf["statement"]


def test_availability_without_interval_is_untested(tmp_path):
    site = write_site(tmp_path)
    avail = guarantees.evaluate(site, contract_result())[1]
    # 1 300 000 kWh expected * (0.98 - 0.95) = 39 000 kWh; 3 900 EUR
    assert avail["finding"] == "shortfall_untested"
    assert_allclose(avail["energy_short_kwh"], 39000.0, atol=1e-6)
    assert_allclose(avail["money_short"], 3900.0, atol=1e-6)


def test_small_shortfall_inside_interval_is_not_shown(tmp_path):
    site = write_site(tmp_path)
    # 0.795 against 0.80 with +-0.015: z = -0.005 / 0.0076532 = -0.653, p = 0.257 > 0.05
    perf = guarantees.evaluate(site, contract_result(0.795, 0.780, 0.810))[0]
    assert perf["finding"] == "not_shown"
    assert_allclose(perf["p_value"], 0.2568, atol=5e-4)
    # 0.81 against 0.80 with +-0.015: z = +1.307, the p-value of "kept" is 1 - Phi(1.307) =
    # 0.096 > 0.05: the point meets the promise but compliance is not shown.
    kept = guarantees.evaluate(site, contract_result(0.81, 0.795, 0.825))[0]
    assert kept["finding"] == "met_not_shown"
    assert "compliance is not shown" in kept["statement"]
    # 0.83 with +-0.015: z = 3.92, compliance shown.
    assert guarantees.evaluate(site, contract_result(0.83, 0.815, 0.845))[0]["finding"] == "met"


def test_incomplete_contract_years_are_not_yet_testable(tmp_path):
    site = write_site(tmp_path)
    # Data from 2025-01-01 to 2025-07-01 local only: contract year 1 (2024-04-01 .. 2025-04-01,
    # 365 days) is covered for 90 days less the DST hour (89.958 days, share 0.246461), year 2
    # (2025-04-01 .. 2026-04-01, 365 days) for 91 days (share 0.249315): neither is complete,
    # so neither promise is tested, and no blend of 0.80 and 0.795 is made.
    r = contract_result()
    r["period"] = {"start": "2025-01-01T00:00:00+01:00", "end": "2025-07-01T00:00:00+02:00"}
    perf = [f for f in guarantees.evaluate(site, r) if f["kind"] == "performance"]
    assert [f["contract_years"] for f in perf] == [[1], [2]]
    assert [f["promised"] for f in perf] == [0.80, 0.795]
    assert [f["finding"] for f in perf] == ["not_yet_testable"] * 2
    assert_allclose([f["covered_share"] for f in perf], [89.958333 / 365, 91 / 365], atol=1e-6)
    assert perf[0]["measured"] is None and perf[0]["energy_short_kwh"] is None
    assert "25% of the contract year covered" in perf[0]["statement"]


def test_each_complete_contract_year_tested_on_the_whole_year(tmp_path):
    site = write_site(tmp_path)
    # A month's view (June 2024) of a history covering contract years 1 and 2 whole: the
    # annual promise is tested on contract year 1's metrics, never on the month's.
    r = contract_result()
    r["period"] = {"start": "2024-06-01T00:00:00+02:00", "end": "2024-07-01T00:00:00+02:00"}
    r["analysis"] = {"history_start": "2024-04-01T00:00:00+02:00",
                     "history_end": "2026-04-01T00:00:00+02:00"}
    r["metrics"]["period"]["pr_temp_corrected"] = 0.60  # the month: not what is tested
    asked = []

    def year(a, b):
        asked.append((a.isoformat(), b.isoformat()))
        return contract_result(0.81, 0.80, 0.82)["metrics"]["period"]

    found = guarantees.evaluate(site, r, year)
    perf = [f for f in found if f["kind"] == "performance"]
    assert asked[0] == YEAR1 and len(perf) == 1
    assert perf[0]["measured"] == 0.81 and perf[0]["finding"] == "met"
    assert perf[0]["covered_share"] == 1.0
    # the whole history: each year with its own promise (0.80, then 0.795)
    r["period"] = {"start": YEAR1[0], "end": "2026-04-01T00:00:00+02:00"}
    perf = [f for f in guarantees.evaluate(site, r, year) if f["kind"] == "performance"]
    assert [(f["contract_year"], f["promised"]) for f in perf] == [(1, 0.80), (2, 0.795)]


WARRANTY = """
[guarantees]
price_per_kwh = 0.10
currency = "EUR"
[guarantees.module_warranty]
first_year_loss_pct = 2.0
yearly_loss_pct = 0.55
start = 2020-01-01
"""


def warranty_result(rate):
    r = contract_result(rate=rate)
    r["period"] = {"start": "2023-01-01T00:00:00+01:00", "end": "2025-01-01T00:00:00+01:00"}
    return r


def test_degradation_inside_interval_of_warranted_curve_is_not_shown(tmp_path):
    site = write_site(tmp_path, WARRANTY)
    (w,) = guarantees.evaluate(site, warranty_result((-0.70, -0.95, -0.45)))
    # After year 1 the warranted curve falls 0.55 %/yr. se = 0.5 / (2 * 1.959964) = 0.12755;
    # z = (-0.70 + 0.55) / 0.12755 = -1.176, p = 0.120 > 0.05: not shown, not a breach.
    assert_allclose(w["promised"], -0.55, atol=1e-9)
    assert_allclose(w["z"], -1.176, atol=1e-3)
    assert w["finding"] == "not_shown"


def test_warranty_not_called_met_when_the_interval_crosses_the_promise(tmp_path):
    site = write_site(tmp_path, WARRANTY)
    # a measured loss of 0.40 %/yr against 0.55 %/yr warranted, interval -0.90 .. +0.10 %/yr:
    # the point meets the warranty, the truth may not (z = 0.15 / 0.2551 = 0.588, p of "kept"
    # 0.278): never "met" (one-sided z test, normal table).
    (w,) = guarantees.evaluate(site, warranty_result((-0.40, -0.90, 0.10)))
    assert w["finding"] == "met_not_shown"
    (w,) = guarantees.evaluate(site, warranty_result((-0.20, -0.30, -0.10)))
    assert w["finding"] == "met"


def test_degradation_breach_hand_worked(tmp_path):
    site = write_site(tmp_path, WARRANTY)
    (w,) = guarantees.evaluate(site, warranty_result((-1.20, -1.45, -0.95)))
    # z = (-1.20 + 0.55) / 0.12755 = -5.096: shown.
    # The period is 731 days; its middle is 2024-01-01 12:00, 1461.5 days after 2020-01-01,
    # age 1461.5 / 365.25 = 4.001369 years. Warranted power 100 - 2 - 0.55 * 3.001369
    # = 96.349247 %; measured (rate held since the start) 100 - 1.2 * 4.001369 = 95.198357 %;
    # energy short = 1 200 000 * (96.349247 / 95.198357 - 1) = 14 507.26 kWh; 1 450.73 EUR.
    assert w["finding"] == "shortfall_shown"
    assert_allclose(w["z"], -5.096, atol=1e-3)
    assert_allclose(w["energy_short_kwh"], 14507.26, atol=0.01)
    assert_allclose(w["money_short"], 1450.73, atol=0.01)


def test_no_rate_means_not_enough_data(tmp_path):
    site = write_site(tmp_path, WARRANTY)
    (w,) = guarantees.evaluate(site, warranty_result(None) | {"degradation": {
        "rate_pct_per_year": None, "status": "not enough data"}})
    assert w["finding"] == "not_enough_data"
    assert w["energy_short_kwh"] is None


def test_warranted_loss_between_the_ages_of_the_pairs():
    # derived from the warranted curve (2 % in year 1, then 0.55 %/yr): pairs whose earlier
    # day is at age t in [0, 1] compare curve(t) = 100 - 2t with curve(t + 1) = 98 - 0.55t,
    # a loss of 2 - 1.45t, mean 2 - 1.45/2 = 1.275 %/yr; past year 1 it is 0.55 %/yr.
    assert_allclose(guarantees.warranted_yoy_loss(0.0, 1.0, 2.0, 0.55), 1.275, atol=1e-12)
    assert_allclose(guarantees.warranted_yoy_loss(3.0, 4.0, 2.0, 0.55), 0.55, atol=1e-12)


def test_warranted_curve_values():
    # the curve itself: 100 at the start, 98 after year 1, 98 - 0.55 * 9 = 93.05 after year 10
    assert_allclose([guarantees.warranted_power_pct(a, 2.0, 0.55) for a in (0, 0.5, 1, 10)],
                    [100.0, 99.0, 98.0, 93.05], atol=1e-12)


def test_no_section_no_findings(tmp_path):
    assert guarantees.evaluate(write_site(tmp_path, ""), example_check()) == []


@pytest.mark.parametrize("extra, message", [
    ("[guarantees]\nconfidence = 2\n", "guarantees.confidence: 2.0 is outside the range"),
    ("[guarantees.performance]\nyearly = []\n", "guarantees.performance.yearly: expected one "
     "guaranteed value per contract year"),
    ("[guarantees.performance]\nyearly = [0.8]\nmetric = \"yield\"\n",
     "guarantees.performance.metric: 'yield' is not one of"),
    ("[guarantees]\nprice = 1\n", "guarantees.price: unknown key"),
])
def test_bad_section_names_key(tmp_path, extra, message):
    site = write_site(tmp_path, extra)
    with pytest.raises(SiteFileError, match=message.replace("(", r"\(")):
        guarantees.evaluate(site, copy.deepcopy(example_check()))
