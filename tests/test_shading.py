"""The statistics of the shading detector against known answers (invented columns of sky).

Each check builds a column of clear intervals whose truth is set by construction, so the
answer follows from the definitions in :mod:`perfcheck.detect.shading` (common practice:
no published reference values exist for these small pieces).
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from perfcheck import detect
from perfcheck.detect import shading
from perfcheck.detect.common import Footprint


def _column(rng: np.random.Generator, days: int = 120, per_day: int = 12,
            growth_deg_per_day: float = 0.15, noise_rate: float = 0.0):
    """Clear intervals of one column: random elevations 0-40 deg, labelled shaded under a
    top that rises linearly from 0 (and at ``noise_rate`` anywhere, as false labels)."""
    day_pos = np.repeat(np.arange(days), per_day)
    elev = rng.uniform(0.5, 40.0, len(day_pos))
    top = growth_deg_per_day * np.arange(days)
    labels = (elev < top[day_pos]) | (rng.random(len(day_pos)) < noise_rate)
    return day_pos, elev, labels, top


def test_fit_top_follows_a_rising_top():
    # derived from the definition: with noise-free labels the fitted top lies between the
    # highest shaded and the lowest unshaded elevation seen each day, so within the spacing
    # of the observed elevations (12 a day over 40 deg: a few degrees) of the truth
    rng = np.random.default_rng(3)
    day_pos, elev, labels, top = _column(rng)
    obs = np.ones(len(day_pos), dtype=bool)
    fit = shading._fit_top(obs, labels, elev, day_pos)
    assert np.all(np.diff(fit) >= 0)  # never falls
    assert np.median(np.abs(fit - top)) < 2.0
    high = shading._fit_top(obs, labels, elev, day_pos, highest=True)
    assert np.all(high >= fit)
    # every label agrees with both fits (no disagreement is possible without noise)
    for f in (fit, high):
        assert np.array_equal(elev < f[day_pos], labels)


def test_fit_top_without_labels_is_zero():
    rng = np.random.default_rng(4)
    day_pos, elev, _, _ = _column(rng)
    fit = shading._fit_top(np.ones(len(elev), dtype=bool), np.zeros(len(elev), dtype=bool),
                           elev, day_pos)
    assert np.all(fit == 0)


@pytest.mark.parametrize("seed", range(5))
def test_column_test_silent_on_scattered_labels(seed):
    # labels at 5 % anywhere and no obstruction: the cross-fitted count is binomial at the
    # column's own rate, so p < 0.001 should not occur in five seeds (false-alarm rate 0.1 %)
    rng = np.random.default_rng(seed)
    day_pos, elev, _, _ = _column(rng, growth_deg_per_day=0.0, noise_rate=0.05)
    labels = rng.random(len(elev)) < 0.05
    _, _, p, _ = shading._column_top(np.ones(len(elev), dtype=bool), labels,
                                     np.ones(len(elev), dtype=bool), elev, day_pos, 0.05)
    assert p > 1e-3


def test_column_test_finds_a_growing_top_among_false_labels():
    rng = np.random.default_rng(7)
    day_pos, elev, labels, top = _column(rng, noise_rate=0.05)
    fit, high, p, end = shading._column_top(np.ones(len(elev), dtype=bool), labels,
                                            np.ones(len(elev), dtype=bool), elev, day_pos,
                                            0.05)
    assert p < 1e-6
    assert end == pytest.approx(top[-1], abs=3.0)
    assert np.all(high >= fit)


def test_bin_trend_takes_the_place_in_the_bin_apart_from_time():
    # derived from OLS: a deficit that depends on the sun's elevation within the bin alone,
    # sampled at elevations that drift with the season, has no trend once the elevation is
    # a covariate (exact without noise); a trend alone would take the drift as growth
    t = np.linspace(0.0, 0.8, 60)
    el = 10.0 + 4.0 * t + np.sin(9 * t)  # the season moves the path across the bin
    az = 120.0 + np.cos(7 * t)
    y = 0.02 * (el - 10.0)
    slope, _, p, errors = shading._bin_trend(t, y, np.column_stack([el, az]))
    assert errors == "HC3 errors"  # no months given
    assert slope == pytest.approx(0.0, abs=1e-9)


def test_bin_trend_reads_hc3_errors_against_t_on_its_residual_degrees_of_freedom():
    # derived from the t statistic's definition (small samples: Student's t on n - k degrees
    # of freedom, common practice): 20 days, a constant, time and two covariates leave 16
    rng = np.random.default_rng(3)
    t = np.linspace(0.0, 0.2, 20)
    where = np.column_stack([10.0 + rng.normal(0, 1, 20), 120.0 + rng.normal(0, 2, 20)])
    y = 0.3 * t + rng.normal(0.0, 0.02, 20)
    slope, se, p, errors = shading._bin_trend(t, y, where)
    assert errors == "HC3 errors"
    assert p == pytest.approx(stats.t.sf(slope / se, 16), rel=1e-9)


def test_screen_keeps_the_bins_that_lost_light_on_average():
    # derived from the definition: the screen's level is half the least growth per year
    tested = {(1, 1): {"mean_deficit": 0.30}, (1, 2): {"mean_deficit": 0.025},
              (2, 1): {"mean_deficit": 0.024}, (2, 2): {"mean_deficit": -0.10}}
    assert sorted(shading._screened(tested, 0.05)) == [(1, 1), (1, 2)]


def test_screen_is_independent_of_the_growth_test_under_no_growth():
    # derived from OLS with a constant (the mean of the values and the slope are uncorrelated,
    # independent under normal errors; Bourgon et al. 2010 require this of a screen): over
    # 2000 invented bins without growth, a bin's mean deficit tells nothing of its p-value,
    # and the p-values of the bins screened in stay uniform (as many below 0.05 as expected)
    rng = np.random.default_rng(7)
    t = np.sort(rng.uniform(0.0, 0.9, 40))
    el = 10.0 + 4.0 * t + rng.normal(0.0, 0.5, 40)
    az = 120.0 + rng.normal(0.0, 2.0, 40)
    means, ps = [], []
    for _ in range(2000):
        y = 0.03 + 0.02 * (el - 10.0) + rng.normal(0.0, 0.05, 40)
        _, _, p, _ = shading._bin_trend(t, y, np.column_stack([el, az]))
        means.append(y.mean())
        ps.append(p)
    means, ps = np.array(means), np.array(ps)
    assert abs(np.corrcoef(means, ps)[0, 1]) < 0.06
    kept = means >= np.median(means)
    assert np.mean(ps[kept] < 0.05) == pytest.approx(0.05, abs=0.02)


def test_days_of_a_tracker_footprint_are_left_out_whole():
    # invented truth: a footprint on inverter A from the middle of day 2 to the morning of
    # day 3 of four; shading reads a day's shape against the day's own level, so both days
    # are left out whole for A, nothing for B or the other days (common practice)
    index = pd.date_range("2024-03-01", periods=96, freq="h", tz="UTC")
    w = SimpleNamespace(index=index, inverters=["A", "B"],
                        day=pd.Series(index.tz_localize(None).normalize(), index=index))
    fp = Footprint(event=None, lo=36, hi=52, cols=["A"])
    out = detect._days_of(w, [fp])
    day = np.arange(96) // 24
    assert out["A"].to_numpy().tolist() == ((day == 1) | (day == 2)).tolist()
    assert not out["B"].any()


def test_clear_day_start_is_the_first_day_the_region_passes_the_share():
    # invented truth: four days of 24 hourly intervals under a flat clear-sky plane
    # irradiance; the region holds 0, 1, 2 and 3 hours of each day, where half the expected
    # power is lost. The clear-day loss share is 0, 1/48, 2/48, 3/48 of the day: the first
    # day beyond 3 % is the third (derived from the definition; the share is common
    # practice)
    index = pd.date_range("2024-03-01", periods=96, freq="h", tz="UTC")
    w = SimpleNamespace(index=index, tz=index.tz, interval_s=pd.Series(3600.0, index=index),
                        day=pd.Series(index.tz_localize(None).normalize(), index=index))
    hour, day = np.arange(96) % 24, np.arange(96) // 24
    region = hour < day
    level_e = np.full(96, 1000.0)
    est = np.where(region, 500.0, 0.0)
    start = shading._clear_day_start(w, region, np.full(96, 800.0), est, level_e, region,
                                     0.03)
    assert start == pd.Timestamp("2024-03-03", tz="UTC")
    assert shading._clear_day_start(w, region, np.full(96, 800.0), est, level_e, region,
                                    0.07) is None


def test_sibling_growth_dismisses_a_bin_only_when_as_large():
    # derived from the definition (common practice: a one-sided z test of a difference):
    # growth 0.40/yr (se 0.05) against a flat sibling (se 0.05) gives z = 0.40 / 0.0707 = 5.7,
    # p = 8e-9, beyond; against a sibling growing 0.35/yr, z = 0.71, p = 0.24, not beyond
    res = {"growth_per_year": 0.40, "se": 0.05}
    assert shading._beyond(res, None, 0.001)
    assert shading._beyond(res, {"growth_per_year": 0.0, "se": 0.05}, 0.001)
    assert not shading._beyond(res, {"growth_per_year": 0.35, "se": 0.05}, 0.001)
    assert shading._beyond(res, {"growth_per_year": 0.0, "se": float("nan")}, 0.001)


def _sky(rng: np.random.Generator, days: int = 200, sigma: float = 0.03):
    """Clear intervals of an invented sky: azimuth columns 0-17, elevation bands 1-3 (5-20
    deg), six intervals a day in every cell, deficits normal around 0 with ``sigma``."""
    cols, bands = np.arange(18), np.arange(1, 4)
    day_pos = np.repeat(np.arange(days), len(cols) * len(bands) * 6)
    column = np.tile(np.repeat(cols, len(bands) * 6), days)
    band = np.tile(np.repeat(bands, 6), days * len(cols))
    elev = band * 5.0 + rng.uniform(0.0, 5.0, len(day_pos))
    d = rng.normal(0.0, sigma, len(day_pos))
    return day_pos, column, band, elev, d


def test_grown_cells_are_the_raised_and_rising_ones():
    # invented truth: in band 1 an obstruction reaches column 5 on day 100 (its beam lost,
    # deficit 0.7 from then on); column 9 stands 0.3 above the rest on every day (the
    # model's error there, steady); everything else is noise. Only column 5 is raised
    # beyond the band's spread and rising (Kendall's tau one-sided, level 0.01); derived
    # from the definitions (common practice)
    rng = np.random.default_rng(11)
    day_pos, column, band, _, d = _sky(rng)
    d[(band == 1) & (column == 5) & (day_pos >= 100)] += 0.7
    d[(band == 1) & (column == 9)] += 0.3
    ref = np.ones(len(d), dtype=bool)
    judged, grown = shading._grown_cells(d, band, column, day_pos, ref, 2.326, 0.01)
    assert grown == [(1, 5)]
    assert len(judged) == 18 * 3
    # a cell seen on fewer than MIN_CELL intervals is not judged
    ref[(band == 2) & (column == 3) & (day_pos >= 1)] = False
    judged, _ = shading._grown_cells(d, band, column, day_pos, ref, 2.326, 0.01)
    assert (2, 3) not in judged and len(judged) == 18 * 3 - 1


def test_labels_keep_the_clear_sky_noise_beside_a_wide_obstruction():
    # invented truth: clear-sky deficits normal with sigma 0.03 everywhere; a wide
    # obstruction takes the beam (deficit +0.7) in band 1 of columns 8-16 from day 60, and
    # only column 12 is a candidate (its neighbours 11 and 13 left out with it, as the
    # detector does): six shaded cells lie in the reference sky, which would widen band 1's
    # noise by four fifths (scaled MAD 0.054). Column 17 of band 1 is a cell the sun
    # crosses on a single day at the sky's edge, shaded. The noise of band 1 must stay that
    # of the clear sky: the scaled MAD of 1,800+ normal values has a relative standard
    # error of about 2.8 % (1.67 / sqrt(2 n), Hampel 1974, from memory), so 15 % is more
    # than five of them; the label rate of the clear sky at level 0.01 (threshold
    # max(2.326 sigma, 0.05) = 0.07 above the centre: 1.0e-2 of a normal) stays within
    # binomial chance of it
    rng = np.random.default_rng(12)
    day_pos, column, band, elev, d = _sky(rng)
    shaded = (band == 1) & (column >= 8) & (column <= 16) & (day_pos >= 60)
    d[shaded] += 0.7
    edge = (band == 1) & (column == 17)
    clear = ~edge | (day_pos == 150)
    d[edge & (day_pos == 150)] += 0.7
    outside = (column < 11) | (column > 13)
    labels, noise = shading._shaded_labels(d, clear, outside, column, elev, day_pos, 10.0,
                                           5.0, 0.01, 0.05)
    band1 = next(b for b in noise["bands"] if b["elevation_from_deg"] == 5.0)
    assert band1["sigma"] == pytest.approx(0.03, rel=0.15)
    assert band1["median_deficit"] == pytest.approx(0.0, abs=0.01)
    assert {c["azimuth_from_deg"] for c in noise["grown_cells"]} == {
        80.0, 90.0, 100.0, 140.0, 150.0, 160.0}
    assert labels[shaded].mean() > 0.99
    free = clear & ~shaded & ~edge
    # binomial: 0.01 of ~19,000 intervals is 190 +- 14; four standard errors
    assert labels[free].mean() < 0.01 + 4 * np.sqrt(0.01 * 0.99 / free.sum())


def test_steady_clear_needs_clear_neighbours():
    # derived from the definition (common practice): an interval clear between cloudy ones
    # (a cloud's bright edge) is not steady, nor are the ends of a clear run; its inner
    # intervals are, per inverter
    clear = pd.DataFrame({"A": [False, True, False, True, True, True, True],
                          "B": [True, True, True, False, True, True, False]})
    out = shading.steady_clear(clear)
    assert out["A"].tolist() == [False, False, False, False, True, True, False]
    assert out["B"].tolist() == [False, True, False, False, False, False, False]


def test_unshaded_level_error_takes_days_as_the_draws():
    # invented truth: in band 2 (10-15 deg), bins 1-4 seen 6 times a day on 20 days; each
    # day's deficit shares a day offset (the day's sky and model error) and the intervals
    # differ by 1e-4 only. The level's standard error is the daily means' standard deviation
    # over sqrt(20), not the intervals' over sqrt(120); bin 5, seen on 4 intervals, takes
    # the band's median and the spread of the four bin levels as its error (derived from
    # the definitions; common practice)
    rng = np.random.default_rng(3)
    day_pos = np.repeat(np.arange(20), 6)
    rows = []
    for az in range(1, 5):
        offset = rng.normal(0.05 * az, 0.02, 20)
        rows.append((np.full(len(day_pos), az * 1000 + 2), day_pos,
                     offset[day_pos] + rng.normal(0.0, 1e-4, len(day_pos))))
    rows.append((np.full(4, 5002), np.arange(4), np.full(4, 0.9)))
    key, days, d = (np.concatenate(x) for x in zip(*rows, strict=True))
    elev = np.full(len(d), 12.0)
    level, se = shading._unshaded_level(d, np.ones(len(d), dtype=bool), key, elev, 5.0, days)
    own = []
    for az in range(1, 5):
        sel = key == az * 1000 + 2
        daily = pd.Series(d[sel]).groupby(days[sel]).mean()
        assert level[sel][0] == pytest.approx(np.median(d[sel]))
        assert se[sel][0] == pytest.approx(daily.std(ddof=1) / np.sqrt(20))
        own.append(np.median(d[sel]))
    few = key == 5002
    assert level[few][0] == pytest.approx(np.median(d))
    assert se[few][0] == pytest.approx(np.std(own, ddof=1))


def test_base_error_adds_in_each_bin_and_in_quadrature_across():
    # invented numbers: bin A holds 10 kWh of the region's expected energy with a level error
    # of 0.01, bin B 5 kWh with 0.02: 0.1 kWh each, in quadrature 0.1414 kWh (arithmetic)
    step = np.full(4, 3600.0)
    level_e = np.array([5000.0, 5000.0, 5000.0, 1000.0])
    key = np.array([1001, 1001, 2001, 2001])
    se = np.array([0.01, 0.01, 0.02, 0.02])
    sel = np.array([True, True, True, False])
    assert shading._base_sigma_kwh(se, level_e, sel, key, step) == pytest.approx(
        np.hypot(0.1, 0.1))
