"""Pure pieces of the sensor, soiling and degradation detectors against invented truths."""

from __future__ import annotations

import types

import numpy as np
import pandas as pd
import pytest

from perfcheck.detect import degradation, sensor, soiling

DAYS = pd.date_range("2024-01-01", periods=240, freq="D")


def _index_with_step(factor: float, rng: np.random.Generator) -> pd.Series:
    """Invented truth: a daily log index, noise sd 1 %, with a sensor reading ``factor`` off
    from 1 April to 15 May (the index moves by -log factor)."""
    x = rng.normal(0.0, 0.01, len(DAYS))
    inside = (DAYS >= "2024-04-01") & (DAYS < "2024-05-15")
    return pd.Series(x - np.log(factor) * inside, index=DAYS)


def _clear_ratio(factor: float, rng: np.random.Generator, every: int = 4) -> pd.Series:
    """The sensor against its clear-sky plane irradiance on every fourth day (the clear
    days), noise sd 2 %, reading ``factor`` off in the same window."""
    days = DAYS[::every]
    inside = (days >= "2024-04-01") & (days < "2024-05-15")
    return pd.Series(rng.normal(0.0, 0.02, len(days)) + np.log(factor) * inside, index=days)


W = types.SimpleNamespace(tz="UTC")


def test_power_faults_finds_a_confirmed_step_and_its_size():
    rng = np.random.default_rng(3)
    (s,) = sensor.power_faults(W, _index_with_step(0.95, rng), _clear_ratio(0.95, rng))
    # invented truth: 1 April to 15 May, sensor 5 % low; the window to the day (CBS on
    # every day, noise 1 % against a 5 % step), the factor within 1 % (45 days of 1 % noise)
    assert s.start == pd.Timestamp("2024-04-01", tz="UTC")
    assert s.end == pd.Timestamp("2024-05-15", tz="UTC")
    assert s.factor == pytest.approx(0.95, abs=0.01)
    np.testing.assert_allclose(s.daily_factor.to_numpy(), 0.95, atol=0.015)


def test_power_faults_needs_the_independent_reference():
    rng = np.random.default_rng(3)
    index = _index_with_step(0.95, rng)
    # the reference did not move (a plant-wide change, not the sensor): nothing
    assert sensor.power_faults(W, index, _clear_ratio(1.0, rng)) == []
    # no clear days at all: nothing either (the power alone cannot tell)
    assert sensor.power_faults(W, index, pd.Series(dtype=float, index=DAYS[:0])) == []


def test_soiling_recovery_must_give_back_the_decline():
    # invented truth: an interval that fell from a clean 1.0 to 0.88 (12 %), daily scale
    # 0.5 %, then a wash back to 1.0 (True), a rise of 2 % (not half of the loss: False) or
    # none (False); alpha 1e-3, three days either side
    rng = np.random.default_rng(5)
    before = 0.88 * np.exp(rng.normal(0, 0.005, 3))
    for level, want in ((1.0, True), (0.90, False), (0.88, False)):
        after = level * np.exp(rng.normal(0, 0.005, 3))
        assert soiling._restored(1.0, before, after, 0.005, 1e-3) is want


def test_ageing_removed_flattens_a_year_on_year_trend():
    # invented truth: an index falling 1 %/yr for two years, one inverter, no noise; the
    # year-on-year median is exactly -1 %, so the index divided by (1 - 0.01)^years is flat
    days = pd.date_range("2023-01-01", periods=731, freq="D")
    years = ((days - days[0]) / pd.Timedelta(days=365.25)).to_numpy(dtype=float)
    plant = pd.Series(0.99 ** (days.dayofyear.to_numpy() * 0 + years), index=days)
    pairs = degradation.pairs(plant)
    assert np.median(pairs) == pytest.approx(-1.0, abs=0.01)  # 365 vs 365.25 days
    flat = degradation.ageing_removed(plant.to_frame("inv1"), plant)
    np.testing.assert_allclose(flat["inv1"].to_numpy(), 1.0, atol=2e-4)
