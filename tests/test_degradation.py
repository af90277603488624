"""The degradation interval: month blocks of year-on-year pairs and the sensor's stability.

Each check is a Monte Carlo of an invented truth stated beside it (seeded, not timed).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from perfcheck.detect import degradation
from perfcheck.site import Model


def ar1(rng: np.random.Generator, n: int, phi: float, sd: float) -> np.ndarray:
    """Stationary AR(1) noise e_t = phi e_{t-1} + a_t with marginal standard deviation sd."""
    a = rng.normal(0.0, sd * np.sqrt(1 - phi * phi), n)
    e = np.empty(n)
    e[0] = rng.normal(0.0, sd)
    for i in range(1, n):
        e[i] = phi * e[i - 1] + a[i]
    return e


def test_month_blocks_cover_the_truth_where_iid_pairs_do_not():
    # Invented truth: a daily index falling 0.5 %/yr for three years, times exp(e_t) with e_t
    # AR(1), phi 0.8, marginal sd 1 % (day-to-day weather and soiling persist for days). The
    # median of R = 100 (PI_{t+365}/PI_t - 1) is then -0.5 %/yr exactly (e_{t+365} - e_t is
    # symmetric about 0). A 95 % interval should cover -0.5 in about 95 % of the trials: the
    # month-block bootstrap does (0.90 to 0.99: about 3 Monte Carlo standard errors of 200
    # trials around 0.95, a little wide because the pairs of years 1-2 and 2-3 share year 2);
    # the i.i.d. bootstrap of the pairs, one pair per block, does not (its interval is about
    # a third as wide as it should be with a correlation time of (1 + phi)/(1 - phi) = 9 days).
    rng = np.random.default_rng(20261202)
    days = pd.date_range("2023-01-01", periods=3 * 365, freq="D")
    t = np.arange(len(days)) / 365.0
    truth = -0.5
    hits = {"month": 0, "iid": 0}
    trials = 200
    for k in range(trials):
        pi = pd.Series((1 + truth / 100) ** t * np.exp(ar1(rng, len(days), 0.8, 0.01)),
                       index=days)
        r = degradation.pairs(pi)
        months = (r.index.year * 12 + r.index.month).to_numpy()
        for name, blocks in (("month", months), ("iid", np.arange(len(r)))):
            boot = degradation.block_median_bootstrap(r.to_numpy(), blocks, 400,
                                                      np.random.default_rng(k))
            lo, hi = np.percentile(boot, [2.5, 97.5])
            hits[name] += lo <= truth <= hi
    assert 0.90 <= hits["month"] / trials <= 0.99
    assert hits["iid"] / trials < 0.75


def test_one_block_per_value_is_the_iid_bootstrap():
    # Definition (Carlstein 1986): with one value per block every resample draws single values
    # with replacement; the bootstrap median then lies within the data's range.
    r = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
    boot = degradation.block_median_bootstrap(r, np.arange(5), 200, np.random.default_rng(1))
    assert boot.min() >= 1.0 and boot.max() <= 5.0 and len(np.unique(boot)) > 1


def test_a_one_percent_step_of_the_reference_is_one_percent_per_year():
    # Invented truth: a plant that does not age, measured against an irradiance sensor whose
    # calibration drops 1 % at the start of the second year (it reads 1 % low, so the expected
    # power is 1 % low and the index 1/0.99 high). Every pair then gives R = 100 (1/0.99 - 1)
    # = 1.0101 %/yr (derived from the year-on-year definition, Jordan et al. 2018).
    days = pd.date_range("2024-01-01", periods=2 * 365, freq="D")
    pi = pd.Series(np.where(np.arange(len(days)) < 365, 1.0, 1 / 0.99), index=days)
    bare = degradation.year_on_year(pi, stability_pct_per_year=0.0, n_boot=200)
    assert bare["rate"] == pytest.approx(100 * (1 / 0.99 - 1), rel=1e-9)
    assert not bare["low"] <= 0.0 <= bare["high"]  # the resampling cannot see the step
    # With the sensor's stability stated as 1 %/yr (rectangular, GUM 4.3.7: u = 1/sqrt(3)),
    # the interval is rate -/+ 1.96/sqrt(3) = 1.1316 %/yr (derived, GUM 5.1.2 with a zero
    # sampling half-width) and covers the true rate 0.
    y = degradation.year_on_year(pi, stability_pct_per_year=1.0, n_boot=200)
    assert y["high"] - y["rate"] == pytest.approx(1.959964 / np.sqrt(3), rel=1e-6)
    assert y["low"] <= 0.0 <= y["high"]


def test_stability_default_from_the_sensor_class():
    # ISO 9060:2018 non-stability limits (from memory): class A 0.8, B 1.5, C 3 %/yr.
    assert degradation.sensor_stability(Model())[0] == 0.8
    assert degradation.sensor_stability(Model(sensor_class="C"))[0] == 3.0
    assert degradation.sensor_stability(Model(sensor_stability_pct_per_year=0.5)) == (
        0.5, "site file model.sensor_stability_pct_per_year")
