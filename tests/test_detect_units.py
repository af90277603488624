"""Pure pieces of the sensor, soiling, degradation, partial-outage and derate detectors
against invented truths."""

from __future__ import annotations

import types

import numpy as np
import pandas as pd
import pytest
from detect_synth import make_aligned, make_site

from perfcheck.detect import clipping, degradation, partial, sensor, soiling
from perfcheck.detect.common import (
    Event,
    Footprint,
    Segment,
    change_points,
    daylight,
    light_adjusted,
    wide,
)

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


def test_soiling_decline_must_show_on_the_days_from_its_onset():
    # invented truth (issue 11): daily scale 0.5 %; 30 days losing 0.3 %/day is a decline
    # (True); 20 clean days then two dull days read 12 % low (the model's error on little
    # light, no loss) is none (False), whatever the widening for autocorrelation
    rng = np.random.default_rng(3)
    x = np.arange(30.0)
    assert soiling._declines_after(1 - 0.003 * x + rng.normal(0, 0.005, 30), x, 1.5)
    y = np.r_[1 + rng.normal(0, 0.005, 20), 0.88, 0.89]
    assert not soiling._declines_after(y, np.arange(22.0), 1.0)


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


# a clean stretch's cost at a noise of 1 % (sawtooth_extent): chi-square, 1 df, 95 %
LR = 0.01 ** 2 * soiling.LR_95


def _sawtooth_age(n: int, spans: tuple[tuple[int, int], ...]) -> np.ndarray:
    """Days since the last wash at each day's mid-point, soiling over each [a, b) of ``spans``
    and clean elsewhere (the rain-reset model of Kimber et al. 2006)."""
    t, age = np.arange(n) + 0.5, np.zeros(n)
    for a, b in spans:
        age[a:b] = t[a:b] - a
    return age


def test_sawtooth_extent_places_the_washes_beside_an_episode():
    # invented truth (the rain-reset model of Kimber et al. 2006): after a found episode, the
    # soiling goes on at 0.4 %/day, washed at days 20 and 45, cleaned at day 60, clean after;
    # noise 1 %, penalty for a false-alarm rate of 1e-3 (ramp_penalty). The washes are placed
    # within a day (common practice: the daily index cannot place them closer)
    rng = np.random.default_rng(1)
    n = 90
    age = _sawtooth_age(n, ((0, 20), (20, 45), (45, 60)))
    y = 1 - 0.004 * age + rng.normal(0, 0.01, n)
    pen = 0.01 ** 2 * soiling.ramp_penalty(n, 1e-3)
    spans = soiling.sawtooth_extent(y, np.ones(n), 0.004, pen, forward=True, gap_cost=LR)
    assert len(spans) == 3
    np.testing.assert_allclose(spans, [(0, 20), (20, 45), (45, 60)], atol=1)
    # before an episode: clean until day 15, washed at 40, the episode's own wash at the end
    age = _sawtooth_age(n, ((15, 40), (40, 90)))
    y = 1 - 0.004 * age + rng.normal(0, 0.01, n)
    spans = soiling.sawtooth_extent(y, np.ones(n), 0.004, pen, forward=False, gap_cost=LR)
    np.testing.assert_allclose(spans, [(15, 40), (40, 90)], atol=1)
    # no soiling beside it: no ramp, either way
    for forward in (True, False):
        y = rng.normal(1, 0.01, n)
        assert soiling.sawtooth_extent(y, np.ones(n), 0.004, pen, forward, gap_cost=LR) == []


def test_sawtooth_extent_steps_over_a_clean_stretch():
    # invented truth (Kimber et al. 2006 rain-reset model): after a found episode the
    # modules stay clean for 20 days (washes too close together to let the dust show), then
    # soil at 0.4 %/day for 25 days until a wash, clean after; noise 1 %. The ramp is
    # placed beyond the clean stretch within a day (common practice, as above), either side
    rng = np.random.default_rng(2)
    n = 120
    pen = 0.01 ** 2 * soiling.ramp_penalty(n, 1e-3)
    for forward in (True, False):
        spans = ((20, 45),) if forward else ((n - 45, n - 20),)
        y = 1 - 0.004 * _sawtooth_age(n, spans) + rng.normal(0, 0.01, n)
        found = soiling.sawtooth_extent(y, np.ones(n), 0.004, pen, forward, gap_cost=LR)
        assert len(found) == 1
        np.testing.assert_allclose(found, spans, atol=1)


def test_edge_ranges_cover_the_soiling_energy_of_placed_ramps():
    # invented truth (Kimber et al. 2006 rain-reset model): 0.4 %/day washed at days 20 and
    # 45, cleaned at 60, noise 1 %, 100 kWh a day; the ramps placed as above and each ramp's
    # energy range over the boundaries the data allow (chi-square 1 degree of freedom at
    # 95 %, 3.841: any chi-square table) hold the true soiling energy in at least 90 % of 100
    # trials (common practice: a 95 % set checked by simulation, with room for its sampling
    # error); without noise the ranges are nil
    rng = np.random.default_rng(7)
    n = 90
    age = _sawtooth_age(n, ((0, 20), (20, 45), (45, 60)))
    energy = np.full(n, 100.0)
    truth = float(np.sum(energy * 0.004 * age))
    pen = 0.01 ** 2 * soiling.ramp_penalty(n, 1e-3)
    hits = 0
    for _ in range(100):
        y = 1 - 0.004 * age + rng.normal(0, 0.01, n)
        spans = soiling.sawtooth_extent(y, np.ones(n), 0.004, pen, True, gap_cost=LR)
        found = sum(float(np.sum(energy[a:b] * 0.004 * (np.arange(b - a) + 0.5)))
                    for a, b in spans)
        edge = np.array(soiling.edge_ranges(y, np.ones(n), 0.004, spans, True, energy,
                                            0.01 ** 2)).reshape(-1, 2)
        hits += bool(found - np.sqrt(np.sum(edge[:, 0] ** 2)) <= truth
                     <= found + np.sqrt(np.sum(edge[:, 1] ** 2)))
    assert hits >= 90
    y = 1 - 0.004 * age
    edge = soiling.edge_ranges(y, np.ones(n), 0.004, [(0, 20), (20, 45), (45, 60)], True,
                               energy, 1e-12)
    np.testing.assert_allclose(edge, 0.0, atol=1e-6)


def test_level_error_is_the_standard_error_of_a_mean():
    # invented truth: independent daily noise of sd 1 % (no autocorrelation); the clean
    # level is a mean of 61 days, so its standard error is 1 % / sqrt(61) (the standard error
    # of a mean, any statistics text), within the sampling error of the robust scale
    rng = np.random.default_rng(3)
    index = pd.Series(1 + rng.normal(0, 0.01, 2000),
                      index=pd.date_range("2020-01-01", periods=2000, freq="D"))
    se = soiling.level_error(index)
    assert se.iloc[1000] == pytest.approx(0.01 / np.sqrt(61), rel=0.1)
    assert se.iloc[0] > se.iloc[1000]  # the first day's window holds only 31 days


def test_ar1_factor_of_independent_and_of_persistent_days():
    # invented truth: independent days give 1; an AR(1) series with phi = 0.5 has a
    # long-run variance 3 times its variance ((1 + phi) / (1 - phi), Hamilton 1994 sec. 7.2,
    # from memory). The deviations from a 15-day rolling median lose part of the slow
    # swings, so the factor found is lower: between that of phi = 0.3 and 3
    rng = np.random.default_rng(4)
    e = rng.normal(0, 0.01, 3000)
    x = np.zeros_like(e)
    for i in range(1, len(e)):
        x[i] = 0.5 * x[i - 1] + e[i]
    assert soiling.ar1_factor(pd.Series(1 + e)) == pytest.approx(1.0, abs=0.05)
    assert 1.3 / 0.7 <= soiling.ar1_factor(pd.Series(1 + x)) <= 3.0


def test_days_of_other_findings_are_left_out_of_the_index():
    # invented case: a lost string on inverter "b" over days 3-4 (rows 72-119 of hourly rows);
    # its days leave that inverter's index, the other inverter keeps them (common practice:
    # a shortfall is attributed once)
    idx = pd.date_range("2024-06-01", periods=240, freq="h")
    days = pd.date_range("2024-06-01", periods=10, freq="D")
    pi = pd.DataFrame({"a": 1.0, "b": 1.0}, index=days)
    w = types.SimpleNamespace(day=pd.Series(idx.normalize(), index=idx))
    ev = Event(kind="partial_outage", scope="inverter:b", start=idx[72], end=idx[119],
               energy_loss_kwh=1.0, energy_loss_kwh_low=0.5, energy_loss_kwh_high=1.5,
               method="", evidence={})
    out = soiling.without_found(pi, w, [Footprint(ev, 72, 120, ["b"],
                                                  factor=np.full((48, 1), 0.2))])
    assert out["a"].notna().all()
    assert out["b"].isna().tolist() == [False] * 3 + [True] * 2 + [False] * 5


def test_ramp_penalty_holds_its_false_alarm_rate():
    # invented truth: 400 series of 60 clean days, noise sd 1 %, searched for ramps of
    # 0.4 %/day at a false-alarm rate of 5 %: ramps are placed in at most 5 % of them (+3
    # binomial standard errors); the Bonferroni bound is conservative (common practice)
    rng = np.random.default_rng(5)
    n, trials = 60, 400
    pen = 0.01 ** 2 * soiling.ramp_penalty(n, 0.05)
    hits = sum(bool(soiling.sawtooth_extent(rng.normal(1, 0.01, n), np.ones(n), 0.004, pen,
                                            forward, gap_cost=LR))
               for forward in (True, False)
               for _ in range(trials // 2))
    assert hits / trials <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / trials)


def test_sawtooth_ignores_single_bad_days():
    # invented truth: a clean index (noise 1 %) with a day 12 % low every 15 days (a dull day
    # the model got wrong); Huber's psi (Huber 1964, k = 1.345) clips each to within 1.345
    # sigma of its neighbours, and then no ramp ends on it (the penalty as above)
    rng = np.random.default_rng(3)
    n = 59
    days = pd.date_range("2024-06-01", periods=n, freq="D")
    y = rng.normal(1, 0.01, n)
    y[14::15] -= 0.12
    index = pd.Series(y, index=days)
    clipped = soiling.huber_clipped(index)
    assert np.all(clipped[14::15] > 0.95)
    pen = 0.01 ** 2 * soiling.ramp_penalty(n, 1e-3)
    assert soiling.sawtooth_extent(clipped, np.ones(n), 0.002, pen, True, gap_cost=LR) == []
    # a ramp's last day before its wash (a step up) is no outlier: it stays
    ramp = pd.Series(np.r_[1 - 0.004 * np.arange(30), np.ones(29)]
                     * rng.normal(1, 0.01, n), index=days)
    assert soiling.huber_clipped(ramp)[29] == ramp.iloc[29]


def test_precise_days_leave_out_the_noisy_dull_days():
    # invented truth: 300 days, every fifth one dull (a third of the clear insolation) with
    # a model error of sd 5 %, the others 0.5 %: the dull days are left out, the others kept
    rng = np.random.default_rng(4)
    days = pd.date_range("2024-01-01", periods=300, freq="D")
    dull = np.arange(300) % 5 == 0
    insolation = pd.Series(np.where(dull, 1.0, 3.0) * rng.uniform(0.95, 1.0, 300), index=days)
    index = pd.Series(np.exp(rng.normal(0, np.where(dull, 0.05, 0.005))), index=days)
    kept = soiling.precise_days(index, insolation, 1e-3)
    assert kept[dull].isna().all() and kept[~dull].notna().all()
    # the same noise on every day: the F test keeps them all (false-alarm rate 1e-3)
    alike = pd.Series(np.exp(rng.normal(0, 0.01, 300)), index=days)
    assert soiling.precise_days(alike, insolation, 1e-3).notna().all()


def test_step_limit_is_the_normal_test_of_two_medians():
    # derived from a normal table: z(0.025) = 1.95996; medians of k = 2 days either side,
    # standard error of their difference 1.2533 sigma sqrt(2 / 2) (sqrt(pi / 2) sigma /
    # sqrt(k) per median, Kendall & Stuart, from memory); one day (n = 1), no Bonferroni
    assert soiling.step_limit(0.01, 1, 0.025, 2) == pytest.approx(0.0195996 * 1.2533, rel=1e-5)
    # Bonferroni over the days: 365 days at alpha 1e-3 is z(2.74e-6) = 4.546 (normal table,
    # between z(1e-5) = 4.265 and z(1e-6) = 4.753), times 1.2533 sqrt(2/3): 4.65 sigma
    assert soiling.step_limit(1.0, 365, 1e-3) == pytest.approx(4.546 * 1.2533 * np.sqrt(2 / 3),
                                                               rel=1e-3)


def test_detection_limit_is_where_a_wash_begins_to_be_found():
    # invented truth: a year of daily index, noise sd 1 %, soiled at a loss L until a wash on
    # day 180. The stored limit is a loss per cycle, 1 - exp(-step), from the index's own
    # scale (within 15 % of the true sd's limit); a wash ending a loss at the limit is found
    # in at least half of 200 runs (the median's standard error 1.2533 sigma / sqrt(k) is
    # the large-k one, above the exact one for k = 3, so the limit errs on the safe side),
    # one of half the limit almost never (the limit as the size found half the time: common
    # practice for a detection limit)
    rng = np.random.default_rng(11)
    days = pd.date_range("2024-01-01", periods=365, freq="D")
    lim = soiling.detection_limit(pd.Series(np.exp(rng.normal(0, 0.01, 365)), index=days),
                                  1e-3, rain_read=False)
    assert lim["days"] == 365 and lim["washes_known_from_rain"] is False
    assert lim["daily_sigma_pct"] == pytest.approx(1.0, rel=0.15)
    assert 100 * -np.expm1(-soiling.step_limit(lim["daily_sigma_pct"] / 100, 365, 1e-3)) \
        == pytest.approx(lim["loss_pct"])

    def found(loss_pct: float) -> float:
        hits = 0
        for _ in range(200):
            level = np.where(np.arange(365) < 180, np.log1p(-loss_pct / 100), 0.0)
            index = pd.Series(np.exp(level + rng.normal(0, 0.01, 365)), index=days)
            hits += any(d == days[180] or abs((d - days[180]).days) <= 1
                        for d, _ in soiling.local_steps_up(index, 1e-3))
        return hits / 200

    at_sigma = 100 * -np.expm1(-soiling.step_limit(0.01, 365, 1e-3))  # the true sd's limit
    assert lim["loss_pct"] == pytest.approx(at_sigma, rel=0.15)
    assert found(at_sigma) >= 0.5
    assert found(at_sigma / 2) <= 0.02
    # too few days for the test: no limit to state
    short = soiling.detection_limit(pd.Series(1.0, index=days[:6]), 1e-3, rain_read=True)
    assert short["loss_pct"] is None


def test_recovery_cause_unknown_without_rain_readings():
    # a step up of 10 % on a quiet index: with no rain readings its cause is unknown, with
    # readings and no rain it is a cleaning (invented truth; alpha 1e-3)
    days = pd.date_range("2024-01-01", periods=40, freq="D")
    rng = np.random.default_rng(2)
    index = pd.Series(np.r_[np.full(20, 0.9), np.full(20, 1.0)]
                      * np.exp(rng.normal(0, 0.003, 40)), index=days)
    for rain, cause in ((np.nan, "unknown"), (0.0, "cleaning")):
        rec = soiling.recoveries(index, pd.Series(rain, index=days), 5.0, 1e-3)
        assert [r["cause"] for r in rec] == [cause]
        assert rec[0]["day"] == days[20]


def test_wash_on_dull_days_is_placed_on_its_day():
    # invented truth: a 10 % step up on day 20 of a quiet index (0.3 % a day), days 18-23
    # dull and left out of the kept index (their index, noisier, 1.5 % a day, still on the
    # level of its side). The step test on the kept days names the first kept day after
    # the wash (day 24, or a kept day beside it); the every-day index puts the wash back on
    # day 20 (alpha 1e-3; common practice: a change-point is placed where the data split)
    days = pd.date_range("2024-01-01", periods=50, freq="D")
    rng = np.random.default_rng(7)
    level = np.r_[np.full(20, 0.9), np.full(30, 1.0)]
    sd = np.where((np.arange(50) >= 18) & (np.arange(50) < 24), 0.015, 0.003)
    every = pd.Series(level * np.exp(rng.normal(0, 1, 50) * sd), index=days)
    kept = every.copy()
    kept[days[18:24]] = np.nan
    rain = pd.Series(np.nan, index=days)
    (told,) = [d for d, _ in soiling.local_steps_up(kept, 1e-3)]
    assert told >= days[24]
    rec = soiling.recoveries(kept, rain, 5.0, 1e-3, every_day=every)
    assert [r["day"] for r in rec] == [days[20]]
    # without the every-day index the recovery stays on the kept day
    assert [r["day"] for r in soiling.recoveries(kept, rain, 5.0, 1e-3)] == [told]


def test_no_recovery_is_read_across_days_left_out():
    # invented truth: a quiet index (0.3 % a day) that stands 8 % higher after 20 days whose
    # data were rebuilt and left out (a clock fault's window) than before them: the season
    # and the model's error move it over weeks, and the step test (medians of 3 days either
    # side, alpha 1e-3) assumes days close together. Read across the hole it is a step;
    # told of the hole, none. A 10 % step on days in a row later on is still found
    days = pd.date_range("2024-01-01", periods=120, freq="D")
    rng = np.random.default_rng(5)
    level = np.r_[np.full(40, 0.92), np.full(50, 1.0), np.full(30, 1.1)]
    index = pd.Series(level * np.exp(rng.normal(0, 0.003, 120)), index=days)
    hole = days[40:60]
    index[hole] = np.nan
    across = {d for d, _ in soiling.local_steps_up(index, 1e-3)}
    told = {d for d, _ in soiling.local_steps_up(index, 1e-3, repaired=hole)}
    assert days[60] in across and days[60] not in told
    assert told and all(abs((d - days[90]).days) <= 1 for d in told)


def test_partial_pieces_of_one_lost_string_are_joined():
    # invented truth: a 5-string inverter at its usual level (log 0) for 60 days, then one
    # string lost (share 0.2) for 30 days while a shade waxes 0 -> 3 % over them, then back;
    # days' noise 0.2 %. The segmentation cuts the drifting stretch (its t test takes days
    # as independent); joined below half a string's share (0.1) it is one segment of the 30
    # days, and its edges are steps of about 0.2 (partial._edge_steps)
    rng = np.random.default_rng(7)
    drift = np.log(0.8) + np.log(1 - np.linspace(0.0, 0.03, 30))
    x = np.r_[np.zeros(60), drift, np.zeros(60)] + rng.normal(0, 0.002, 150)
    segs = change_points(x, alpha=1e-3, min_size=3)
    ref = max(segs, key=lambda g: g.stop - g.start)
    low = [g for g in partial.merge_within(x, segs, ref, 0.5 / 5) if g.mean < -0.1]
    assert len([g for g in segs if g.mean < -0.1]) > 1  # the cut this guards against
    assert [(g.start, g.stop) for g in low] == [(60, 90)]
    assert min(partial._edge_steps(x, 60, 90, 3)) > 0.5 * 0.2


def test_partial_string_changes_stay_apart():
    # invented truth: two strings lost of 5 (log 0.6), then one found again (log 0.8): the
    # levels differ by a string's share, so the two segments stay apart; the reference is
    # never joined
    x = np.r_[np.zeros(10), np.full(10, np.log(0.6)), np.full(10, np.log(0.8))]
    segs = [Segment(0, 10, 0.0), Segment(10, 20, float(np.log(0.6))),
            Segment(20, 30, float(np.log(0.8)))]
    assert partial.merge_within(x, segs, segs[0], 0.1) == segs
    near = [Segment(0, 10, 0.0), Segment(10, 20, -0.01)]
    assert partial.merge_within(x, near, near[0], 0.1) == near


def test_partial_noisy_days_inside_a_lost_string_are_joined():
    # invented truth: one string of 6 lost (log(5/6)) for 20 days, its last 6 days few-interval
    # winter days, their noise 0.1 and their level 12 % lower still by chance; the rest
    # 1 % noise. The two pieces differ by less than a string's share (1/6) and Welch's test
    # (Welch 1947) on their own days cannot tell them apart at alpha 1e-3: one segment. A
    # lost string seen on three days beside a long segment lower by 1.6 strings of 12 stays
    # apart, however few its days
    rng = np.random.default_rng(11)
    lost = np.log(5 / 6)
    x = np.r_[rng.normal(lost, 0.01, 14), rng.normal(lost - 0.13, 0.1, 6)]
    segs = [Segment(0, 14, float(x[:14].mean())), Segment(14, 20, float(x[14:].mean()))]
    ref = Segment(20, 40, 0.0)
    joined = partial.merge_within(x, [*segs, ref], ref, 0.5 / 6, alpha=1e-3)
    assert [(g.start, g.stop) for g in joined] == [(0, 20), (20, 40)]
    assert partial.merge_within(x, [*segs, ref], ref, 0.5 / 6) == [*segs, ref]  # no alpha
    y = np.r_[np.full(3, np.log(0.83)) + rng.normal(0, 0.01, 3), rng.normal(np.log(0.95), 0.03,
                                                                          169)]
    apart = [Segment(0, 3, float(y[:3].mean())), Segment(3, 172, float(y[3:].mean()))]
    top = Segment(172, 200, 0.0)
    assert partial.merge_within(y, [*apart, top], top, 0.5 / 12, alpha=1e-3) == [*apart, top]
    # three healthy days (1 % below the reference: no string lost) before a lost string of 7,
    # 13 % below: under a string's share apart, but a healthy level is never joined to a fault
    h = np.r_[rng.normal(-0.01, 0.01, 3), rng.normal(np.log(1 - 0.13), 0.01, 25)]
    pieces = [Segment(0, 3, float(h[:3].mean())), Segment(3, 28, float(h[3:].mean()))]
    top = Segment(28, 60, 0.0)
    assert partial.merge_within(h, [*pieces, top], top, 0.5 / 7, alpha=1e-3) == [*pieces, top]



def test_light_dependence_of_healthy_days_is_removed():
    # invented truth: a lone inverter whose ratio to expected falls by 0.05 per unit of the
    # log of the day's mean plane irradiance (a low-light behaviour the model does not know),
    # noise 1 %; the reference holds days from 200 to 700 W/m^2. The slope and its variance
    # are those of ordinary least squares (statsmodels' OLS as the reference; Draper & Smith
    # 1998, ch. 1); a day dimmer than any of the reference is taken at the reference's
    # dimmest; the level of the reference is kept
    from statsmodels.regression.linear_model import OLS
    from statsmodels.tools.tools import add_constant

    rng = np.random.default_rng(5)
    light = np.log(rng.uniform(200.0, 700.0, 120))
    light[100:105] = np.log(80.0)  # five dull days outside the reference
    x = 0.05 * (light - np.log(400.0)) + rng.normal(0.0, 0.01, 120)
    ref = slice(0, 100)
    xa, slope_var, _ = light_adjusted(x, light, ref)
    fit = OLS(x[:100], add_constant(light[:100])).fit()
    assert slope_var == pytest.approx(fit.bse[1] ** 2, rel=1e-9)
    assert np.mean(xa[:100]) == pytest.approx(np.mean(x[:100]), abs=1e-12)
    assert np.std(xa[:100]) < 0.012  # the light's share of the spread removed
    dimmest = light[:100].min()
    np.testing.assert_allclose(
        xa[100:105], x[100:105] - fit.params[1] * (dimmest - light[:100].mean()), rtol=1e-9)
    # without light values (no plane irradiance that day) a day stays as it is
    light[110] = np.nan
    assert light_adjusted(x, light, ref)[0][110] == x[110]
    # the healthy days given as a mask fit alike
    mask = np.zeros(120, dtype=bool)
    mask[:100] = True
    np.testing.assert_array_equal(light_adjusted(x, light, mask)[0],
                                  light_adjusted(x, light, ref)[0])

def _held_day(rng: np.random.Generator, level: float, peak: float, sd: float
              ) -> tuple[pd.Series, pd.Series]:
    """Invented truth: one day of 5-minute intervals, expected power a sine arch peaking at
    ``peak`` [W], measured power the expected held at ``level`` with noise sd ``sd``."""
    t = pd.date_range("2024-03-01 06:00", "2024-03-01 18:00", freq="5min", inclusive="left")
    e = pd.Series(peak * np.sin(np.pi * np.arange(len(t)) / len(t)), index=t)
    return np.minimum(e, level) * (1 + rng.normal(0.0, sd, len(t))), e


def test_plateau_tolerance_is_the_normal_quantile_of_the_plateau_noise():
    # invented truth: a limit of 10 kW held on one day, reading noise sd 0.3 %; the two-sided
    # normal quantile at alpha 1e-3 is 3.2905 (standard normal tables), so the half-width is
    # about 1 %; 15 % tolerance for the robust scale of about 50 plateau readings
    m, _ = _held_day(np.random.default_rng(1), 10000.0, 14000.0, 0.003)
    days = m.index.normalize().to_numpy()
    limit = pd.Series([10000.0], index=pd.DatetimeIndex(["2024-03-01"]))
    tol_p = clipping.plateau_tolerance(m, limit, days, 0.05, 1e-3)
    assert tol_p == pytest.approx(3.2905 * 0.003, rel=0.15)
    # a quiet meter: never below the 0.5 % floor; a noisy one: never above ``tol``
    m0, _ = _held_day(np.random.default_rng(1), 10000.0, 14000.0, 0.0)
    assert clipping.plateau_tolerance(m0, limit, days, 0.05, 1e-3) == 0.005
    assert clipping.plateau_tolerance(m, limit, days, 0.004, 1e-3) == 0.004


def test_a_day_shows_a_limit_only_when_the_power_stays_flat_below_a_moving_expectation():
    # invented truth (common practice: a plateau while the expected power moves): a day held
    # at 10 kW under an arch to 14 kW shows the limit; an unlimited day whose power peaks at
    # 10 kW under an expected power 6 % higher (it follows the expected curve over its flat
    # top) does not, nor a day whose arch never reaches the limit; the day held at 10 kW rose
    # above a limit of 9.5 kW
    rng = np.random.default_rng(2)
    held = _held_day(rng, 10000.0, 14000.0, 0.001)
    free_m, free_e = _held_day(rng, 1e9, 10000.0, 0.001)
    low = _held_day(rng, 10000.0, 8000.0, 0.001)
    for (m, e), shows in ((held, True), ((free_m, free_e * 1.06), False), (low, False)):
        days = m.index.normalize().to_numpy()
        assert bool(clipping.days_at(m, e, days, 10000.0, 0.03, 0.005).iloc[0]) is shows
        assert not clipping.days_above(m, days, 10000.0, 0.005).iloc[0]
    m = held[0]
    assert clipping.days_above(m, m.index.normalize().to_numpy(), 9500.0, 0.005).iloc[0]


def test_one_reading_far_above_the_plateau_shows_the_day_rose_above_the_limit():
    # invented truth: a day held at 10 kW under an arch to 14 kW, reading noise sd 0.1 %
    # (plateau tolerance 0.5 %, sigma 0.5 % / 3.29); one reading 5 % above the limit is 33
    # sigmas out, beyond the Bonferroni bound z(1 - alpha / 2n) = 4.5 sigmas for the day's
    # 144 readings at alpha 1e-3 (standard normal tables), so the day rose above it; one
    # reading 0.6 % above (3.9 sigmas) is within it and alone does not (common practice: two
    # such readings), nor one far above where the expected power is below the limit (a spike)
    m, e = _held_day(np.random.default_rng(4), 10000.0, 14000.0, 0.001)
    days = m.index.normalize().to_numpy()
    assert not clipping.days_above(m, days, 10000.0, 0.005, 1e-3, e).iloc[0]
    for at, jump, rose in ((70, 1.05, True), (70, 1.006, False), (3, 1.05, False)):
        hit = m.copy()
        hit.iloc[at] = 10000.0 * jump
        assert bool(clipping.days_above(hit, days, 10000.0, 0.005, 1e-3, e).iloc[0]) is rose


def test_a_derate_window_ends_on_the_last_day_that_shows_the_limit():
    # invented truth: held on days 5-8; days 3 and 10 show the limit, days 2, 4 and 9 are
    # cloudy (nothing either way), days 1 and 11 rose above it and day 12 shows it again
    # (beyond a day above the limit: not the same derate)
    d = pd.date_range("2024-03-01", periods=13, freq="D")
    at = pd.Series(False, index=d)
    at.iloc[[3, 5, 6, 7, 8, 10, 12]] = True
    up = pd.Series(False, index=d)
    up.iloc[[1, 11]] = True
    win = clipping._widen(d[5], d[8], at, up, pd.Series(0.0, index=d))
    assert win[:4] == (d[3], d[10], d[1], d[11])
    # before: day 2 lies without evidence between day 3 and the day above, two candidates
    # alike, half a day of expected error; after: day 11 follows day 10, no error
    assert (win.first_error_d, win.last_error_d) == (0.5, 0.0)


def test_a_derate_window_ends_midway_in_days_without_evidence():
    # invented truth: held on days 5-8, days 9-12 cloudy (nothing either way), day 13 rose
    # above the limit; the last held day is any of days 8-12 alike, and their median, day
    # 10, is the edge with the least expected error (Laplace 1774, from memory). Before:
    # day 4 cloudy, day 3 above: days 4 and 5 alike, the lower median is the held day 5.
    d = pd.date_range("2024-03-01", periods=15, freq="D")
    at = pd.Series(False, index=d)
    at.iloc[[5, 6, 7, 8]] = True
    up = pd.Series(False, index=d)
    up.iloc[[3, 13]] = True
    none = pd.Series(0.0, index=d)
    win = clipping._widen(d[5], d[8], at, up, none)
    assert win[:4] == (d[5], d[10], d[3], d[13])
    # candidates 8-12 around day 10: distances 2, 1, 0, 1, 2, mean 1.2 d (worked by hand);
    # days 4-5: 0 and 1, mean 0.5 d
    assert (win.first_error_d, win.last_error_d) == (0.5, 1.2)
    # without a day above the limit the edge is the data's, its error not stated
    assert np.isnan(clipping._widen(d[5], d[8], at, pd.Series(False, index=d), none).last_error_d)
    # a reading on the plateau on day 12 nine times likelier under the limit: candidates 8-12
    # weigh 1, 1, 1, 1, 9 (the limit held through day 12 in the last only), the posterior
    # median is day 12, its expected error (4 + 3 + 2 + 1) / 13 d (worked by hand)
    lr = none.copy()
    lr.iloc[12] = np.log(9.0)
    win = clipping._widen(d[5], d[8], at, up, lr)
    assert win.last == d[12]
    assert win.last_error_d == pytest.approx(10 / 13)


def test_a_reading_on_the_plateau_weighs_by_the_censored_normal_likelihood():
    # invented truth: five readings the limit cannot touch at 0.9 of the expected power, log
    # ratios spread by -0.02..0.02 (MAD 0.01), and one reading at the limit where the
    # unlimited power is due exactly at it (z = 0): P(above) 1/2 under the limit against the
    # normal density 1/(sqrt(2 pi) s) times the plateau's width 2 tol_p without (closed form)
    level, tol_p = 10000.0, 0.005
    idx = pd.date_range("2024-03-01 09:00", periods=6, freq="h")
    e = np.array([2000.0, 3000.0, 4000.0, 5000.0, 6000.0, level / 0.9])
    m = np.r_[0.9 * e[:5] * np.exp([-0.02, -0.01, 0.0, 0.01, 0.02]), level]
    days = idx.normalize().to_numpy()
    got = clipping.plateau_log_lr(pd.Series(m, index=idx), pd.Series(e, index=idx), days,
                                  level, tol_p, 1e-3)
    s = 1.4826 * 0.01
    assert got.iloc[0] == pytest.approx(np.log(0.5 * np.sqrt(2 * np.pi) * s / (2 * tol_p)))
    # a day with no reading on the plateau weighs nothing either way
    m2 = m.copy()
    m2[5] = 0.8 * level
    assert clipping.plateau_log_lr(pd.Series(m2, index=idx), pd.Series(e, index=idx), days,
                                   level, tol_p, 1e-3).iloc[0] == 0.0
    # held where the unlimited power stands far above the limit: strong evidence of it
    e3 = e.copy()
    e3[5] = 1.5 * level
    assert clipping.plateau_log_lr(pd.Series(m, index=idx), pd.Series(e3, index=idx), days,
                                   level, tol_p, 1e-3).iloc[0] > 5


def test_a_lost_string_starts_after_the_last_half_day_at_the_upper_level():
    # invented truth: one inverter at ratio 1.0; from day 2 a fault on one side of the day
    # (a stalled row's rest) lowers its mornings to 0.9; strings lost from day 5 10:00 take
    # 15 % all day. The daily medians put the fault's first day on day 3; the afternoons of
    # days 2-4 stand at the upper level, so the strings were there until day 4's evening and
    # the start lies in day 5's morning (at or before 10:00: its earlier readings, lowered
    # by the other fault, cannot tell)
    idx = pd.date_range("2024-03-01 06:00", periods=10 * 96, freq="15min")
    idx = idx[(idx.hour >= 6) & (idx.hour < 18)]
    morning = idx.hour < 12
    ratio = np.ones(len(idx))
    ratio[(idx >= "2024-03-03") & morning] = 0.9
    ratio[idx >= "2024-03-06 10:00"] *= 0.85
    e = pd.DataFrame({"A": np.full(len(idx), 1000.0)}, index=idx)
    w = types.SimpleNamespace(day=pd.Series(idx.normalize(), index=idx), inverters=["A"],
                              measured=e * ratio[:, None], expected=e,
                              azimuth=pd.Series(np.where(morning, 120.0, 240.0), index=idx))
    usable = pd.DataFrame({"A": True}, index=idx)
    lo, hi = partial._edges(w, usable, "A", pd.Timestamp("2024-03-04"),
                            pd.Timestamp("2024-03-10"), 1.0, 0.85, 3)
    assert pd.Timestamp("2024-03-06 06:00") <= idx[lo] <= pd.Timestamp("2024-03-06 10:00")
    assert hi == len(idx)


def test_a_lost_string_seen_on_three_days_is_found():
    # invented truth: one inverter of 6 strings, 2 lost (share 1/3) from 1 to 16 May; as in
    # a winter at a high latitude the model expects enough power on three of those days only.
    # The days' noise is the series' own, so the fault's mean is tested against the
    # reference with the variance pooled (Student 1908); Welch's test, on the fault's own
    # variance from three days (2 degrees of freedom), cannot reach alpha 1e-3 there (the
    # interval noise of 15 % makes the days' noise a few per cent, as at such a plant)
    site = make_site(n_inverters=1, strings=6)
    fault = {"kind": "partial", "inverter": "INV1", "start": "2024-05-01 00:00",
             "end": "2024-05-16 00:00", "share": 1 / 3}
    df = make_aligned(site, start="2024-04-01", days=60, faults=[fault], seed=5,
                      noise=0.15)
    w = wide(df, {i.id: i.ac_kw * 1000.0 for i in site.inverters}, None, site.tz)
    usable = daylight(w) & w.expected.ge(w.ac_w * 0.2, axis=1)
    day = w.day.to_numpy()
    seen = np.isin(day, pd.to_datetime(["2024-05-03", "2024-05-08", "2024-05-13"]).to_numpy())
    inside = (day >= np.datetime64("2024-05-01")) & (day < np.datetime64("2024-05-16"))
    usable = usable & ~(inside & ~seen)[:, None]
    events, _ = partial.detect(w, usable, {"INV1": 6})
    assert [e.detail["strings_lost"] for e in events] == [2]
    assert events[0].evidence["days"] == 3


def _one_day(measured: np.ndarray, expected: np.ndarray, ac_w: float) -> types.SimpleNamespace:
    """One inverter ``A`` on one day of 15-minute readings from 07:00 (the fields of a Wide
    that :func:`clipping.derated_days` reads)."""
    idx = pd.date_range("2024-02-01 07:00", periods=len(measured), freq="15min")
    m, e = (pd.DataFrame({"A": v}, index=idx) for v in (measured, expected))
    return types.SimpleNamespace(measured=m, expected=e, day=pd.Series(idx.normalize(), idx),
                                 interval_s=pd.Series(900.0, idx), ac_w=pd.Series({"A": ac_w}),
                                 inverters=["A"])


def test_a_broad_peak_below_the_expected_power_is_not_a_held_day():
    # invented truth (issue 11, a fault-free plant with a 15-minute logger): a clear winter
    # day, the inverter (40 kW) at 0.91 of a smooth expected curve, the expected power with
    # +-1 % irregular noise the measured power does not share. Around noon three readings
    # lie within 1 % of the day's highest, flat while the expected power moves and stands
    # above them by the 5 % margin: 45 minutes, the plateau test alone holds the day. The
    # day's own ratio of measured to expected power predicts those readings: the likelihood
    # ratio of a limit stays below 1/alpha and the day is not held.
    bell = np.sin(np.pi * np.arange(41) / 40)
    expected = 8500 / 0.91 * bell * (1 + 0.01 * np.sin(2.3 * np.arange(41)))
    free = _one_day(8500 * bell, expected, 40000.0)
    got = clipping.derated_days(free, free.measured < 0, 0.01, 0.05, 1e-3)
    assert got["A"].isna().all()
    # the same day limited at 6000 W (0.71 of its peak): held at the limit
    limited = _one_day(np.minimum(8500 * bell, 6000.0), expected, 40000.0)
    got = clipping.derated_days(limited, limited.measured < 0, 0.01, 0.05, 1e-3)
    assert got["A"].iloc[0] == pytest.approx(6000.0)


def test_a_stuck_run_holds_one_value():
    # common practice: a stuck sensor repeats one reading. Invented readings [W/m^2] at
    # 15 min, the clear sky above 50 W/m^2 all along: two equal pairs side by side (95.7,
    # 95.7, 93.1, 93.1) are no hour of one value; six readings of 598.4 are 90 min stuck
    idx = pd.date_range("2024-10-17 10:00", periods=12, freq="15min", tz="UTC")
    w = types.SimpleNamespace(interval_s=pd.Series(900.0, index=idx), index=idx)
    v = pd.Series([121.1, 118.0, 101.2, 93.7, 95.7, 95.7, 93.1, 93.1, 99.1, 103.5, 108.8,
                   112.1], index=idx)
    sky = pd.Series(500.0, index=idx)
    assert sensor.stuck_faults(w, v, sky) == []
    v.iloc[3:9] = 598.4
    (s,) = sensor.stuck_faults(w, v, sky)
    assert (s.start, s.end, s.evidence["minutes"]) == (idx[3], idx[9], 90.0)


def test_stuck_runs_of_many_values_as_read_one_by_one():
    # common practice, as above: each stretch of identical consecutive readings is one run.
    # Invented readings at 1 min, the clear sky above 50 W/m^2 all along, drawn from few
    # values (so runs and value changes are many, as in a sensor logged in whole W/m^2),
    # checked against a plain reading of the series one value at a time
    rng = np.random.default_rng(7)
    idx = pd.date_range("2024-06-01", periods=20_000, freq="min", tz="UTC")
    w = types.SimpleNamespace(interval_s=pd.Series(60.0, index=idx), index=idx)
    v = rng.choice([210.0, 211.0, 212.0], 8_000).repeat(rng.integers(1, 6, 8_000))[:len(idx)]
    got = [(s.start, s.end) for s in sensor.stuck_faults(
        w, pd.Series(v, index=idx), pd.Series(500.0, index=idx), min_stuck_minutes=4.0)]
    want, a = [], 0
    for i in range(1, len(v) + 1):
        if i == len(v) or v[i] != v[a]:
            if i - a >= 4:  # 4 readings of one minute
                want.append((idx[a], idx[i - 1] + pd.Timedelta(minutes=1)))
            a = i
    assert len(want) > 100 and got == want


def test_declining_finds_a_late_decline_and_holds_its_false_alarm_rate():
    # invented truth (Kimber et al. 2006 rain-reset model): an index drifting up 0.01 %/day
    # for 300 days (the model's seasonal error), then soiling at 0.4 %/day for 30 days, noise
    # 1 %; the whole interval rises by Kendall's test, the test from the hinge's onset finds
    # the decline, the true rate inside its Theil-Sen 95 % interval. On clean noise the
    # onset's Bonferroni correction holds the one-sided rate at alpha = 5 % (+3 binomial
    # standard errors; common practice)
    rng = np.random.default_rng(6)
    x = np.arange(330.0)
    y = (1 + 0.0001 * np.minimum(x, 300) - 0.004 * np.maximum(0.0, x + 0.5 - 300)
         + rng.normal(0, 0.01, 330))
    f = soiling.declining(y, x, np.ones(330), 1e-3)
    assert f is not None and f["low"] <= -0.004 <= f["high"]
    trials = 100
    hits = sum(soiling.declining(rng.normal(1, 0.01, 60), x[:60], np.ones(60), 0.05)
               is not None for _ in range(trials))
    assert hits / trials <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / trials)
