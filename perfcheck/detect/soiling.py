"""Soiling: a gradual decline of the daily performance index between recoveries.

The plant's daily performance index is the median over the inverters of each inverter's
insolation-weighted daily measured/expected, divided by its own median (so inverters of other
orientation or size count alike and one inverter's own fault does not move it). Dull days, whose
index is several times noisier than a clear day's, are left out where that makes the index more
precise (:func:`precise_days`); the soiling ratio found still applies to them. Recoveries are
(a) days on which some 24-hour rain total reaches ``rain_mm`` in the readings and (b)
significant local steps up of the index (:func:`local_steps_up`), each placed on its day by
every day's index, the dull days too (:func:`wash_day`: a wash on a dull day is otherwise
put on the next clear one, days late); a step up with at least 1 mm
of rain on that day or the day before is a rain recovery, one on days with rain readings and
less rain a cleaning, and one on days without rain readings (no rain gauge, a gap) of unknown
cause: rain and a cleaning look alike in the index. Between two recoveries the index is fitted
by a Theil-Sen line; an interval whose slope is negative with Kendall's test p-value below
``alpha`` (or whose days from the onset of a hinge fit decline so, at ``alpha`` over the days
the onset could be: a late decline in a long interval, :func:`declining`), ended by a
recovery that gives back at least half of its decline (:func:`_restored`), with its days
from the onset declining themselves (:func:`_declines_after`), is a soiling interval; the
interval still open at the end of the data counts when it declines like the confirmed ones
(:func:`_like`). Soiling may start some days after the recovery (a grace
period, as in Kimber et al. 2006): the onset is the hinge of the weighted least-squares fit of a
level followed by a linear decline. Its soiling ratio is that fit over the clean level: the
plateau before the onset where there is one, else the rolling median of the index outside the
soiling intervals where that is above the line's start (a partial recovery), else the line's
start (a full recovery). Consecutive soiling intervals form one soiling episode (one event) with
its recoveries.

Where rain washes the modules every week or two, most washes give back less than the day-to-
day noise of the index and no test finds them one by one: a found episode is then only the
longest dry spell of a longer one. So each episode is carried into the days beside it as a
series of ramps at its own rate, each from a wash, placed by optimal partitioning
(:func:`sawtooth_extent`): it reaches as far as ramps at that rate explain the index better
than its clean level by more than a penalty per ramp that noise alone exceeds with
probability at most ``alpha`` over all the ramps the days could hold (:func:`ramp_penalty`).
Clean stretches may lie between the ramps (a run of washes too close together for the dust
to show), each at most half the clean level's window long: the ramps no longer need to run
on from the episode without a break, so a clear tooth beyond a few clean-looking weeks joins
it. The days are first clipped by Huber's psi about their neighbours (:func:`huber_clipped`): in
least squares one dull day the model got wrong would otherwise end a ramp of its own.

Detection limit. Without rain readings every wash must be found as a step of the index, at
``alpha`` over the n days (Bonferroni): a step of z_(alpha/n) 1.2533 sigma sqrt(2/3), about
4.6 sigma for a year of days at alpha = 1e-3, with sigma the daily scale of the kept days.
A soiling whose washes come before the loss reaches that (0.3 %/day washed every two weeks
is a 4 % tooth; sigma is about 0.5 % on a plant with a plane-of-array sensor and 1-4 % on one
modelled from horizontal irradiance) is below what the daily index can show and is not
reported; a found episode is carried into such teeth beside it only by the sawtooth fit
above. The analysis stores that limit as a loss per cycle (:func:`detection_limit`) and the
report says it, so that a reader knows which soiling could be there unseen. With a rain
gauge the washes are known and only each interval's decline is tested (a least-squares
slope over L days has a standard error of sigma sqrt(12 / L^3); the Theil-Sen slope's is
close to it).

Energy band (95 %): the rate's Theil-Sen interval (widened for days in a row that share
their error) and the model's daily error, relative to
the loss; the clean level's standard error (a mean of the days of its window), on the
expected energy; and, for each ramp, how far its energy moves over the wash days the data
allow (the likelihood-ratio set of a change-point, Hinkley 1970) and with a wash inside it
too small to place; added in quadrature. Days another finding explains (a lost string, a
stalled row: their share is put back in the power) are left out of the index: their
shortfall is not soiling's to take.

The false-alarm probability per interval tested is ``alpha`` (Kendall's test, one-sided
decline; the run passes 1e-3), and per series ``alpha`` for the steps up (Bonferroni over
the days), and per side of an episode ``alpha`` for the ramps placed beside it. The
extension adds no episode: it only widens a found one. ``rain_mm`` default
5 mm in 24 hours: common practice (Kimber et al. 2006 use a rain threshold of this order; no
single source).

References
----------
Deceglie, Micheli & Muller 2018, "Quantifying soiling loss directly from PV yield", IEEE J.
Photovolt. 8(2):547: the stochastic rate and recovery method (insolation-weighted daily index,
recoveries from rain and from jumps, Theil-Sen rates per interval) (from memory); Kimber,
Mitchell, Nogradi & Wenger 2006, IEEE 4th WCPEC, the rain-reset soiling model; Jackson et
al. 2005, "An algorithm for optimal partitioning of data on an interval", IEEE Signal
Process. Lett. 12(2):105 (from memory); Hinkley 1970, "Inference about the change-point in
a sequence of random variables", Biometrika 57(1):1 (from memory).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from perfcheck.detect.common import (
    Event,
    Footprint,
    Wide,
    energy_band,
    mann_kendall_slope,
    robust_sigma,
)
from perfcheck.lazy import lazy_module

stats = lazy_module("scipy.stats")

LR_95 = 3.841  # chi-square, 1 degree of freedom, 95 % (any chi-square table)
STEP_DAYS = 3  # the days either side of a wash whose medians a step up compares

METHOD = ("Theil-Sen decline of the daily performance index (without the dull days where "
          "they make it noisier) between recoveries (rain, "
          "detected steps up), in the spirit of Deceglie, Micheli & Muller 2018; carried into "
          "the days beside it as ramps at its rate, each placed only where noise alone would "
          "not explain it")


def plant_index(pi: pd.DataFrame) -> pd.Series:
    """Median over inverters of each inverter's daily index divided by its own median."""
    return (pi / pi.median()).median(axis=1, skipna=True)


def without_found(pi: pd.DataFrame, w: Wide, found: Sequence[Footprint]) -> pd.DataFrame:
    """The daily index ``pi`` (days by inverter) with the days of each finding in ``found``
    left out on its inverters: a shortfall another cause explains is not soiling's to take,
    and the share put back for it (an estimate of a lost string's or a row's share, which
    moves with the weather) would leave a drift of its own in the index."""
    out = pi.copy()
    for fp in found:
        touched = pd.DatetimeIndex(np.unique(w.day.to_numpy()[fp.lo:fp.hi]))
        cols = [c for c in fp.cols if c in out.columns]
        out.loc[out.index.isin(touched), cols] = np.nan
    return out


def precise_days(index: pd.Series, insolation: pd.Series, alpha: float, half_days: int = 7,
                 bins: int = 5) -> pd.Series:
    """The daily index on the days that make it most precise, NaN on the dull days left out.

    A dull day's index is much noisier than a clear one's (the model's irradiance errs more
    under broken cloud). The days fall into ``bins`` classes of equal size by their
    clearness, the day's expected ``insolation`` over the largest within ``half_days`` days
    either side (the clearest day nearby stands for a clear sky); each class's variance is
    (1.4826 MAD)^2 of the log index about its centred rolling median (2 ``half_days`` + 1
    days). From the dullest on, a class is left out while (a) that makes an unweighted mean
    of the kept days more precise (its variance above 2 + 1/m times the mean variance of the
    m clearer classes: mean(s^2) / n falls) and (b) its variance is larger than theirs by an
    F test at ``alpha`` (degrees of freedom 0.37 n, the efficiency of the MAD at the normal,
    Rousseeuw & Croux 1993, J. Amer. Statist. Assoc. 88:1273, from memory): classes alike
    stay, whatever their sampling error. Weighting the days by 1 / s^2 would be better still,
    but the tests here are rank and median tests on equal days."""
    x = np.log(index)
    dev = x - x.rolling(2 * half_days + 1, center=True, min_periods=half_days).median()
    clear = insolation / insolation.rolling(2 * half_days + 1, center=True,
                                            min_periods=1).max()
    ok = dev.notna() & clear.notna()
    if ok.sum() < 10 * bins:
        return index
    cls = pd.qcut(clear[ok].rank(method="first"), bins, labels=False).to_numpy()
    d = dev[ok].to_numpy()
    var = np.array([(1.4826 * np.median(np.abs(d[cls == k]))) ** 2 for k in range(bins)])
    count = np.bincount(cls, minlength=bins)
    first = 0
    while first < bins - 1:
        m = bins - 1 - first
        rest = float(var[first + 1:].mean())
        f_p = stats.f.sf(var[first] / rest, 0.37 * count[first],
                         0.37 * count[first + 1:].sum()) if rest > 0 else 0.0
        if not (var[first] > (2 + 1 / m) * rest and f_p < alpha):
            break
        first += 1
    if first == 0:
        return index
    edge = float(clear[ok][cls == first].min())
    return index.where(clear >= edge)


def step_limit(sigma: float, n: int, alpha: float, k: int = STEP_DAYS) -> float:
    """The least step of the log daily index that :func:`local_steps_up` finds among ``n``
    days: the one-sided normal quantile of ``alpha / n`` (Bonferroni over the days) times the
    standard error of the difference of two medians of ``k`` days, 1.2533 ``sigma``
    sqrt(2 / k) (the median of k normal values has a standard error of sqrt(pi / 2) sigma /
    sqrt(k) for large k, Kendall & Stuart, The Advanced Theory of Statistics, vol. 1, from
    memory; for k = 3 the exact one is smaller, so the limit errs on the safe side)."""
    return float(stats.norm.isf(alpha / n) * 1.2533 * sigma * np.sqrt(2.0 / k))


def local_steps_up(index: pd.Series, alpha: float, k: int = STEP_DAYS,
                   repaired: pd.DatetimeIndex | None = None) -> list[tuple[pd.Timestamp, float]]:
    """Days where the index steps up: the median of the ``k`` values from that day on exceeds
    the median of the ``k`` values before it by more than :func:`step_limit` (sigma from
    :func:`perfcheck.detect.common.robust_sigma`, n the days). Local maxima only; (day,
    relative step).

    ``repaired``: days whose data were rebuilt and left out (a clock or sensor fault's
    window). A step whose 2 k values lie on either side of such days is not taken: the test
    compares days close together, and across weeks left out the index moves with the
    season and the model's own error, which the difference's standard error does not hold.
    """
    s = index.dropna()
    x = np.log(s.to_numpy())
    n = len(x)
    if n < 2 * k + 1:
        return []
    sigma = robust_sigma(x)
    if not sigma > 0:
        return []
    win = np.lib.stride_tricks.sliding_window_view(x, k)
    med = np.median(win, axis=1)  # med[i] = median of x[i:i+k]
    i = np.arange(k, n - k + 1)
    delta = med[i] - med[i - k]
    out = []
    for j in np.flatnonzero(delta > step_limit(sigma, n, alpha, k)):
        lo, hi = max(0, j - k), min(len(delta), j + k + 1)
        first, last = s.index[i[j] - k], s.index[i[j] + k - 1]
        if repaired is not None and ((repaired > first) & (repaired < last)).any():
            continue
        if delta[j] == delta[lo:hi].max():
            out.append((s.index[i[j]], float(np.exp(delta[j]) - 1)))
    return out


def detection_limit(index: pd.Series, alpha: float, rain_read: bool, k: int = STEP_DAYS
                    ) -> dict:
    """The least soiling loss per cycle (the loss reached when a wash ends it) that the daily
    ``index`` can show: a wash must step the index up by :func:`step_limit` to be found as a
    recovery, and a clean/soiled ratio of exp(limit) is a loss of 1 - exp(-limit) of the
    clean output. Below it a soiling is not told from the day-to-day noise (the sawtooth fit
    carries a found episode into smaller teeth beside it, but finds none of its own). With
    rain readings (``rain_read``) the rain washes are known without a step, and a smaller
    decline between them can be found; the limit then holds for washes no rain reading marks
    (a cleaning, rain the gauge missed). The loss [%], the index's daily scale [%]
    (:func:`perfcheck.detect.common.robust_sigma` of its log), the days and ``alpha``."""
    x = np.log(index.dropna().to_numpy())
    sigma = robust_sigma(x)
    limit = step_limit(sigma, len(x), alpha, k) if len(x) >= 2 * k + 1 else float("nan")
    return {"loss_pct": 100 * float(-np.expm1(-limit)) if np.isfinite(limit) else None,
            "daily_sigma_pct": 100 * sigma if np.isfinite(sigma) else None,
            "days": len(x), "alpha": alpha, "washes_known_from_rain": rain_read,
            "statistic": "one-sided normal test of the step between the medians of the "
                         f"{k} days either side of a wash, at alpha over the days "
                         "(Bonferroni)"}


def wash_day(index: pd.Series, every_day: pd.Series, day: pd.Timestamp,
             k: int = STEP_DAYS) -> pd.Timestamp:
    """The day a step up of the kept ``index`` (:func:`local_steps_up`) happened. ``day``
    is the first kept day of the recovered level by the medians of ``k`` kept days either
    side, but the wash may have come on a day left out as dull (:func:`precise_days`), and
    where kept days are few the medians either side of two neighbouring days differ alike.
    Every day's index over the 2 ``k`` kept days the test compared (``every_day``: the index
    before the dull days were left out) shows the level each day was on: the wash is the
    split of those days into the soiled level (the median of the ``k`` kept days before
    ``day``) and the recovered one (the median of the ``k`` from it) with the least sum of
    absolute log deviations (the least-absolute-deviation change-point, robust to a dull day
    the model got wrong; Bai 1995, "Least absolute deviation estimation of a shift",
    Econometric Theory 11(3):403, from memory); ties go to the later day."""
    s = index.dropna()
    at = int(s.index.searchsorted(day))
    if at < k or at + k > len(s):
        return day
    low = float(np.log(np.median(s.iloc[at - k:at])))
    high = float(np.log(np.median(s.iloc[at:at + k])))
    span = every_day[(every_day.index >= s.index[at - k])
                     & (every_day.index <= s.index[at + k - 1])].dropna()
    x = np.log(span.to_numpy())
    cost = [np.abs(x[:c] - low).sum() + np.abs(x[c:] - high).sum()
            for c in range(1, len(x))]
    return span.index[len(cost) - int(np.argmin(cost[::-1]))]


def recoveries(index: pd.Series, rain_daily: pd.Series, rain_mm: float, alpha: float,
               min_days: int = STEP_DAYS, repaired: pd.DatetimeIndex | None = None,
               every_day: pd.Series | None = None) -> list[dict]:
    """Recovery days (the first day of the recovered level), with cause ("rain", "cleaning",
    or "unknown" where ``rain_daily`` is NaN on the day and the day before: no rain readings)
    and step size; ``repaired`` as in :func:`local_steps_up`; ``every_day``: the index with
    the dull days too, where a step's wash is placed (:func:`wash_day`)."""
    s = index.dropna()
    out: dict[pd.Timestamp, dict] = {}
    rain = rain_daily.reindex(index.index)
    for day in rain.index[rain >= rain_mm]:
        nxt = day + pd.Timedelta(days=1)
        out[nxt] = {"day": nxt, "cause": "rain", "rain_mm": float(rain.loc[day]),
                    "detected_step": None}
    for day, step in local_steps_up(s, alpha, min_days, repaired):
        if every_day is not None:
            day = wash_day(s, every_day, day, min_days)
        near = [d for d in out if abs((d - day).days) <= 1]
        if near:
            out[near[0]]["detected_step"] = step
            continue
        out[day] = {"day": day, **_cause(rain, day), "detected_step": step}
    merged: list[dict] = []
    for d in sorted(out):  # one recovery per wet spell: days in a row count once
        if merged and (d - merged[-1]["day"]).days <= 1:
            if merged[-1]["detected_step"] is None:
                merged[-1]["detected_step"] = out[d]["detected_step"]
            continue
        merged.append(out[d])
    return merged


def _cause(rain_daily: pd.Series, day: pd.Timestamp) -> dict:
    """Cause of a recovery on ``day`` that no rain total explains: "rain" with at least 1 mm
    on that day or the day before, "cleaning" with less, "unknown" without rain readings."""
    wet = rain_daily.reindex([day - pd.Timedelta(days=1), day])
    if wet.isna().all():
        return {"cause": "unknown", "rain_mm": None}
    mm = float(wet.max())
    return {"cause": "rain" if mm >= 1.0 else "cleaning", "rain_mm": mm}


def detect(w: Wide, pi: pd.DataFrame, rel_sigma: float, rain_mm: float = 5.0,
           alpha: float = 0.01, min_days: int = 5, undone: Sequence[Footprint] = (),
           repaired: pd.DatetimeIndex | None = None
           ) -> tuple[list[Event], list[Footprint], pd.Series, dict]:
    """Soiling episodes, their footprints, the daily soiling ratio (1 where clean) and the
    least loss per cycle the index can show (:func:`detection_limit`).

    ``undone``: the findings whose share of the power ``w.measured`` has put back (lost
    strings, stalled rows); their inverters' days are left out of the index
    (:func:`without_found`). ``repaired``: the site-local days whose data were rebuilt and
    left out of ``pi`` (clock and sensor faults): no step of the index is read across them
    (:func:`local_steps_up`)."""
    days = pd.DatetimeIndex(pi.index)
    insolation = w.expected.sum(axis=1).groupby(w.day.to_numpy()).sum().reindex(days)
    every_day = plant_index(without_found(pi, w, undone))
    idx = precise_days(every_day, insolation, alpha)
    # rain: the largest 24-hour total ending within the day
    step_s = float(np.median(w.interval_s))
    roll = w.rain.fillna(0.0).rolling(max(1, int(round(86400 / step_s))), min_periods=1).sum()
    read = w.rain.notna().groupby(w.day.to_numpy()).any().reindex(days, fill_value=False)
    rain_daily = roll.groupby(w.day.to_numpy()).max().reindex(days).where(read)
    recs = recoveries(idx, rain_daily, rain_mm, alpha, repaired=repaired, every_day=every_day)
    bounds = [days[0]] + [r["day"] for r in recs if days[0] < r["day"] <= days[-1]] + \
        [days[-1] + pd.Timedelta(days=1)]
    rec_at = {r["day"]: r for r in recs}
    x_all = ((days - days[0]) / pd.Timedelta(days=1)).to_numpy(dtype=float)
    soiling = np.zeros(len(days), dtype=bool)
    fits = []
    insolation = insolation.to_numpy()
    sigma = robust_sigma(np.log(idx.dropna().to_numpy()))
    rate_widen = float(np.sqrt(ar1_factor(idx)))
    for a, b in zip(bounds[:-1], bounds[1:], strict=True):
        sel = (days >= a) & (days < b)
        y = idx.to_numpy()[sel]
        if np.isfinite(y).sum() < min_days:
            continue
        f = declining(y, x_all[sel], insolation[sel], alpha)
        if f is None:
            continue
        line, onset, _x0 = _hinge(x_all[sel] + 0.5, y, insolation[sel])
        if not _declines_after(y[onset:], x_all[sel][onset:], rate_widen):
            continue
        before = idx[sel].dropna().iloc[-min_days:].to_numpy()
        after = idx[(days >= b)].dropna().iloc[:min_days].to_numpy()
        if _restored(line[0], before, after, sigma, alpha) or (
                b > days[-1] and _like(f, [g[3] for g in fits])):
            soiling[sel] = True
            fits.append((a, b, sel, f))
    clean = pd.Series(np.where(soiling, np.nan, idx.to_numpy()), index=days)
    clean_level = clean.rolling(61, center=True, min_periods=10).median()
    ratio = pd.Series(1.0, index=days)
    for _a, _b, sel, f in fits:
        # a day's index stands for its middle (the insolation-weighted centre): x + 0.5
        line, onset, x0 = _hinge(x_all[sel] + 0.5, idx.to_numpy()[sel], insolation[sel])
        f["onset"] = days[0] + pd.Timedelta(days=x0)
        # the rate and its interval from the days after the onset (Theil-Sen)
        post = mann_kendall_slope(idx.to_numpy()[sel][onset:], x_all[sel][onset:])
        f["rate"] = post["slope"] if np.isfinite(post["slope"]) else f["slope"]
        f["rate_low"], f["rate_high"] = post["low"], post["high"]
        # a clean plateau before the onset is this interval's own clean level; without one,
        # the clean level around it where that is higher (a partial recovery), else the start
        # of the line (a full recovery)
        ref = np.full(len(line), line[0])
        if onset < 2:
            ref = np.fmax(ref, clean_level[sel].to_numpy())
        f["clean_level"] = float(np.mean(ref))
        f["onset_at"] = int(np.flatnonzero(sel)[0]) + onset
        ratio[sel] = np.minimum(1.0, line / ref)
    exp_daily = w.energy_kwh(w.expected).sum(axis=1).groupby(w.day.to_numpy()).sum()
    groups = _extend(idx, fits, ratio, rec_at, rain_daily, soiling, alpha,
                     exp_daily.reindex(days).fillna(0.0).to_numpy())
    events, prints = _episodes(w, groups, ratio, rec_at, rel_sigma, exp_daily,
                               level_error(idx), rate_widen)
    return events, prints, ratio, detection_limit(idx, alpha, bool(read.any()))


def declining(y: np.ndarray, x: np.ndarray, weight: np.ndarray, alpha: float
              ) -> dict | None:
    """The Theil-Sen fit (:func:`perfcheck.detect.common.mann_kendall_slope`) of an interval
    between two recoveries whose index ``y`` (days ``x``) declines by Kendall's test,
    one-sided at ``alpha``; None where it does not. A decline that starts late in a long
    interval (the modules stayed clean for months, or the wash before it was too small to
    find) is lost in the whole interval's test: then the days from the onset of the hinge
    fit (:func:`_hinge`, ``weight`` the day's expected energy) on are tested, at ``alpha``
    over the m days the onset could be (Bonferroni: the p-value times m)."""
    f = mann_kendall_slope(y, x)
    if f["slope"] < 0 and f["p_value"] / 2 < alpha:
        return f
    onset = _hinge(x + 0.5, y, weight)[1]
    if onset == 0:
        return None
    post = mann_kendall_slope(y[onset:], x[onset:])
    post["p_value"] = min(1.0, post["p_value"] * int(np.isfinite(y).sum()))
    return post if post["slope"] < 0 and post["p_value"] / 2 < alpha else None


def _declines_after(y: np.ndarray, x: np.ndarray, widen: float) -> bool:
    """Whether the days from an interval's onset (``y`` on days ``x``), the decline its soiling
    ratio is drawn from, decline themselves: the upper end of their Theil-Sen slope's 95 %
    interval (Sen 1968), widened by ``widen`` for days in a row that share their error
    (:func:`ar1_factor`), below zero. A long interval can pass Kendall's test on the model's
    seasonal error (its days drift for months) while the hinge puts the loss in a few dull
    days at its end; those do not measure a loss. One-sided 2.5 % on top of the test that found
    the interval."""
    f = mann_kendall_slope(y, x)
    return bool(f["slope"] + widen * (f["high"] - f["slope"]) < 0)


def _restored(clean: float, before: np.ndarray, after: np.ndarray, sigma: float,
              alpha: float) -> bool:
    """Whether an interval's recovery is a significant step up that gives back at least half
    of its loss: the median of the days ``after`` it (the first k from the recovery on) less
    the median of the last k days ``before`` it, in log, tested one-sided at ``alpha``
    against the standard error of that difference (1.2533 sigma sqrt(2 / k), ``sigma`` the
    index's daily scale, as in :func:`local_steps_up`), and at least half of the drop from the
    interval's ``clean`` start (its fitted plateau, :func:`_hinge`) to the days before. Soiling
    is undone by a wash (Kimber et al. 2006; Deceglie et al. 2018 count an interval up to its
    recovery); a decline that nothing undoes (ageing, the model's seasonal error, a loss that
    persists) is not soiling."""
    if len(after) == 0 or len(before) == 0 or not sigma > 0 or not clean > 0:
        return False
    step = float(np.log(np.median(after) / np.median(before)))
    lost = float(np.log(clean / np.median(before)))
    z = stats.norm.isf(alpha) * 1.2533 * sigma * np.sqrt(2.0 / len(after))
    return bool(step > z and step >= 0.5 * lost)


def _like(f: dict, confirmed: list[dict]) -> bool:
    """Whether an interval still open at the end of the data declines like the plant's
    confirmed soiling intervals (its Theil-Sen 95 % interval overlaps one of theirs): the
    same soiling building again, where a decline of its own could be anything."""
    return any(f["low"] <= g["high"] and g["low"] <= f["high"] for g in confirmed)


def _hinge(x: np.ndarray, y: np.ndarray, weight: np.ndarray, min_tail: int = 3
           ) -> tuple[np.ndarray, int, float]:
    """Fit y = a + b max(0, x - x0): ``a`` the median of the days before the onset (the clean
    plateau), ``b`` by weighted least squares on the days after it, the onset x0 searched on a
    quarter-day grid by the weighted absolute residuals (robust to a day that the model got
    wrong); the fitted values, the first position at or after the onset, and x0.
    ``weight``: the day's expected energy (a dull day's index is noisier)."""
    ok = np.isfinite(y) & np.isfinite(weight) & (weight > 0)
    sw = np.sqrt(weight[ok])
    best = (np.inf, 0.0, None)
    last = x[max(0, len(x) - min_tail)]
    xo, yo, wo = x[ok], y[ok], weight[ok]
    for x0 in np.arange(x[0], max(last, x[0]) + 1e-9, 0.25):
        h = np.maximum(0.0, xo - x0)
        pre = h == 0
        a0 = float(np.median(yo[pre])) if pre.any() else float(yo[0])
        den = float(np.sum(wo * h * h))
        if den <= 0:
            continue
        b = float(np.sum(wo * h * (yo - a0)) / den)
        cost = float(np.sum(sw * np.abs(yo - a0 - b * h)))
        if cost < best[0] and b < 0:
            best = (cost, float(x0), np.array([a0, b]))
    if best[2] is None:
        return np.full(len(x), np.nanmedian(y)), 0, float(x[0])
    x0, coef = best[1], best[2]
    k = int(np.searchsorted(x, x0))
    return coef[0] + coef[1] * np.maximum(0.0, x - x0), k, x0


def cleaning_saving_kwh(ratio: pd.Series, expected_daily_kwh: pd.Series, clean_day: pd.Timestamp,
                        next_recovery: pd.Timestamp, rate_per_day: float) -> float:
    """Energy a cleaning on ``clean_day`` would have saved until the next recovery [kWh].

    After the cleaning the ratio restarts at 1 and declines again at the fitted rate
    (``rate_per_day`` as a fraction per day, negative), never below the observed ratio.
    """
    sel = (ratio.index >= clean_day) & (ratio.index < next_recovery)
    d = ((ratio.index[sel] - clean_day) / pd.Timedelta(days=1)).to_numpy(dtype=float)
    after = np.maximum(1.0 + rate_per_day * d, ratio[sel].to_numpy())
    e = expected_daily_kwh.reindex(ratio.index[sel]).fillna(0.0).to_numpy()
    return float(np.sum(e * (after - ratio[sel].to_numpy())))


def long_run_variance(index: pd.Series) -> float:
    """Variance of the daily index about its local level times the factor of
    :func:`ar1_factor`: the long-run variance of an AR(1) series (a fit to days in a row
    gains that much more by chance than on independent days; Hamilton 1994, sec. 7.2, from
    memory). Unlike the scale of the raw index, whose persistence includes the soiling ramps
    themselves, this is the noise about the local level that a ramp competes with."""
    var, factor = _local_noise(index)
    return var * factor


def ar1_factor(index: pd.Series) -> float:
    """(1 + phi) / (1 - phi) for the lag-one autocorrelation phi of the daily index about
    its local level (:func:`_local_noise`): how much a variance from days in a row exceeds
    the same from independent days (an AR(1) series; Hamilton 1994, sec. 7.2, from memory)."""
    return _local_noise(index)[1]


def _local_noise(index: pd.Series, half_days: int = 7) -> tuple[float, float]:
    """Variance of the daily index about its centred rolling median (2 ``half_days`` + 1 days;
    1.4826 MAD, robust to outliers) and (1 + phi) / (1 - phi) for the lag-one autocorrelation
    phi of those deviations (clipped to [0, 0.9] as in
    :func:`perfcheck.detect.common.long_run_sigma`)."""
    dev = (index - index.rolling(2 * half_days + 1, center=True, min_periods=half_days)
           .median()).to_numpy()
    ok = np.isfinite(dev)
    if ok.sum() < 10:
        return float("nan"), 1.0
    d = dev[ok]
    var = float((1.4826 * np.median(np.abs(d - np.median(d)))) ** 2)
    pair = ok[1:] & ok[:-1]
    phi = float(np.corrcoef(dev[1:][pair], dev[:-1][pair])[0, 1]) if pair.sum() > 3 else 0.0
    phi = min(max(phi if np.isfinite(phi) else 0.0, 0.0), 0.9)
    return var, (1 + phi) / (1 - phi)


def huber_clipped(index: pd.Series, k_days: int = 1, k: float = 1.345) -> np.ndarray:
    """The daily index with each day clipped to within ``k`` times the index's scale
    (:func:`perfcheck.detect.common.robust_sigma`) of the range of the medians of the
    ``k_days`` days before it and of those after it: Huber's psi function (Huber 1964,
    "Robust estimation of a location parameter", Ann. Math. Statist. 35(1):73; k = 1.345,
    95 % efficiency at the normal, from memory) about a level that keeps steps, as one side
    of a wash follows the day. A day the model got badly wrong (a dull day's irradiance) then
    weighs no more than an ordinary one in a least-squares fit of ramps, while a ramp's last
    day before its wash stays as it is."""
    before = index.shift(1).rolling(k_days).median()
    after = index[::-1].shift(1).rolling(k_days).median()[::-1]
    lo = np.minimum(before, after).fillna(index)  # a day without both sides stays
    hi = np.maximum(before, after).fillna(index)
    band = k * robust_sigma(np.log(index.dropna().to_numpy()))
    return np.clip(index, lo * (1 - band), hi * (1 + band)).to_numpy()


def _groups(fits: list) -> list[list]:
    """Consecutive soiling intervals (one ends where the next begins) as one episode each."""
    groups: list[list] = []
    for f in fits:
        if groups and groups[-1][-1][1] == f[0]:
            groups[-1].append(f)
        else:
            groups.append([f])
    return groups


def _extend(idx: pd.Series, fits: list, ratio: pd.Series, rec_at: dict,
            rain_daily: pd.Series, soiled: np.ndarray, alpha: float, energy: np.ndarray,
            passes: int = 5) -> list[list]:
    """The episodes (:func:`_groups`), each found one reaching as far as its rate explains
    the days beside it (:func:`sawtooth_extent`, backward from its onset to the previous
    episode and forward from its last recovery to the next one): the washes in between are
    too small to find one by one (a step as large as the noise), but the ramps they end fit
    together. The ramps join the episode as intervals of its rate, their washes as
    recoveries (the cause from the rain readings, :func:`_cause`); ``ratio`` takes their
    soiling.

    The clean level beside an episode is the 61-day rolling mean of the index with the
    soiling taken out (the found intervals, ``soiled``, left out; the ramps divided by their
    ratio), fitted in turns with the ramps until they stay (at most ``passes``): soiling
    beside an episode would pull a level of the raw index down and hide itself. Each ramp
    carries how far its energy could move with the wash it was placed at
    (:func:`edge_ranges`; ``energy``: the expected energy per day [kWh]). An episode's
    intervals need not meet: clean days may lie between its ramps."""
    if not fits:
        return []
    days = pd.DatetimeIndex(idx.index)
    y = huber_clipped(idx)
    var = long_run_variance(idx)
    groups = _groups(fits)
    base = np.where(soiled, np.nan, y)
    ramp_ratio = np.ones(len(days))
    cuts: list = []
    for _ in range(passes):
        level = pd.Series(base / ramp_ratio, index=days).rolling(
            61, center=True, min_periods=10).mean().to_numpy()
        new = _cuts(y, level, groups, days, var, alpha)
        if new == cuts:
            break
        cuts = new
        ramp_ratio = np.ones(len(days))
        for lo, _hi, spans, rel in cuts:
            for a, b in spans:
                ramp_ratio[lo + a:lo + b] = np.clip(1 - rel * (np.arange(b - a) + 0.5), 0, 1)
    out: list = []
    for g, (back, fwd) in zip(groups, zip(cuts[0::2], cuts[1::2], strict=True), strict=True):
        first = g[0][3]
        segs = [_ramps(lo, spans, rel, f, days, y, level, rec_at, rain_daily,
                       edge_ranges(y[lo:hi], _near(level, lo, hi, f), rel, spans, forward,
                                   energy[lo:hi], var))
                for (lo, hi, spans, rel), f, forward in ((back, first, False),
                                                       (fwd, g[-1][3], True))]
        if segs[0]:  # the found interval now begins at its onset, a wash of the ramps before
            start = days[first["onset_at"]]
            a0, b0, sel0, f0 = g[0]
            f0["onset"] = start
            g[0] = (start, b0, sel0 & (days >= start), f0)
        for k, (_a, _b, sel, f) in enumerate(g):  # the uncertain onset of each found one
            on = np.flatnonzero(sel)
            # its onset is a wash of the ramps before it, or the end of its clean plateau
            lo, spans = (back[0], back[2]) if k == 0 and segs[0] else (int(on[0]), [])
            end = int(on[-1]) + 1
            f["edge_kwh"] = edge_ranges(y[lo:end], _near(level, lo, end, f),
                                        -f["rate"] / f["clean_level"],
                                        spans + [(f["onset_at"] - lo, end - lo)],
                                        False, energy[lo:end], var)[-1]
        out.append(segs[0] + g + segs[1])
    ratio.iloc[:] = np.where(ramp_ratio < 1, ramp_ratio, ratio.to_numpy())
    return out


def _cuts(y: np.ndarray, level: np.ndarray, groups: list, days: pd.DatetimeIndex,
          var: float, alpha: float) -> list[tuple[int, int, list[int], float]]:
    """The ramps beside each episode (:func:`sawtooth_extent`): per episode, backward then
    forward, (first and end positions of the days searched, boundaries from the first,
    rate as a share of the clean level)."""
    out: list = []
    read = pd.Series(np.isfinite(y)).rolling(61, center=True, min_periods=1).sum().to_numpy() \
        >= 10
    done = 0  # the first day no episode has taken
    for k, g in enumerate(groups):
        nxt = int(np.searchsorted(days, groups[k + 1][0][0])) if k + 1 < len(groups) \
            else len(days)
        # the last recovery is the first day of the recovered level: the ramps after it
        # begin on it, so that they join the episode
        end = int(np.searchsorted(days, g[-1][1]))
        for lo, hi, f, forward in ((done, g[0][3]["onset_at"], g[0][3], False),
                                   (end, nxt, g[-1][3], True)):
            rel = -f["rate"] / f["clean_level"]
            # no farther than a clean level could be known (the days of the level's window):
            # across a long gap in the readings a ramp would run on with nothing to hold it
            gone = np.flatnonzero(~read[lo:hi])
            if len(gone):
                lo, hi = (lo, lo + gone[0]) if forward else (lo + gone[-1] + 1, hi)
            spans: list[tuple[int, int]] = []
            if hi > lo and np.isfinite(var):
                spans = sawtooth_extent(y[lo:hi], _near(level, lo, hi, f), rel,
                                        var * ramp_penalty(hi - lo, alpha), forward,
                                        var * LR_95)
            out.append((lo, hi, spans, rel))
            done = max(done, lo + (spans[-1][1] if spans else 0), end)
    return out


def _near(level: np.ndarray, lo: int, hi: int, f: dict) -> np.ndarray:
    """The clean level on the days [lo, hi) beside the interval ``f``, its own clean level
    where the rolling level has too few days."""
    return np.where(np.isfinite(level[lo:hi]), level[lo:hi], f["clean_level"])


def _ramps(lo: int, spans: list[tuple[int, int]], rel: float, f: dict, days: pd.DatetimeIndex,
           y: np.ndarray, level: np.ndarray, rec_at: dict, rain_daily: pd.Series,
           edges: list[tuple[float, float]]) -> list:
    """The ramps (start, end) of ``spans``, from day ``lo``, as soiling intervals of the
    rate of ``f``, each with its ``edges`` (:func:`edge_ranges`); their washes join ``rec_at``."""
    segs = []
    for (a, b), edge in zip(spans, edges, strict=True):
        sel = np.zeros(len(days), dtype=bool)
        sel[lo + a:lo + b] = True
        end = days[lo + b] if lo + b < len(days) else days[-1] + pd.Timedelta(days=1)
        e = {"onset": days[lo + a], "rate": f["rate"], "rate_low": f["rate_low"],
             "rate_high": f["rate_high"], "slope": float("nan"), "p_value": float("nan"),
             "n": int(np.isfinite(y[lo + a:lo + b]).sum()),
             "clean_level": float(np.nanmean(level[lo + a:lo + b])) if
             np.isfinite(level[lo + a:lo + b]).any() else f["clean_level"], "placed": True,
             "edge_kwh": edge}
        segs.append((days[lo + a], end, sel, e))
        if end not in rec_at and lo + b < len(days):
            rec_at[end] = {"day": end, **_cause(rain_daily, end), "detected_step": None}
    return segs


def level_error(index: pd.Series, window: int = 61) -> pd.Series:
    """Relative standard error of the clean level a day's soiling is measured from: the
    mean of the index's days within the level's ``window``, sqrt(v / m) with v the
    long-run variance of the index (:func:`long_run_variance`, autocorrelation counted) and
    m the days read in the window."""
    m = index.notna().astype(float).rolling(window, center=True, min_periods=1).sum()
    return np.sqrt(long_run_variance(index) / m.where(m > 0))


def _level_sigma_kwh(e_day: pd.Series, se: pd.Series, window: int = 61) -> float:
    """Standard error of an episode's soiling energy from its clean level's error ``se``
    (:func:`level_error`) on days of expected energy ``e_day`` [kWh]: the level is shared
    by the days of a ``window`` (added linearly within each block of that many days) and
    independent between blocks (in quadrature)."""
    c = (e_day * se.reindex(e_day.index)).fillna(0.0).to_numpy()
    block = np.arange(len(c)) // window
    return float(np.sqrt(np.sum(np.bincount(block, weights=c) ** 2)))


def _episodes(w: Wide, groups: list[list], ratio: pd.Series, rec_at: dict, rel_sigma: float,
              exp_daily: pd.Series, level_se: pd.Series, rate_widen: float
              ) -> tuple[list[Event], list[Footprint]]:
    """The soiling episodes (``groups`` of intervals, :func:`_extend`) as events and
    footprints. ``rate_widen``: the factor by which
    the rates' Theil-Sen intervals (independent days, Sen 1968) widen for days in a row
    that share their error (sqrt of :func:`ar1_factor`)."""
    events, prints = [], []
    days_of = w.day.to_numpy()
    for g in groups:
        a, b = g[0][3]["onset"], g[-1][1]
        sel = (ratio.index >= a) & (ratio.index < b)
        loss = 1 - ratio[sel]
        e_day = exp_daily.reindex(ratio.index[sel]).fillna(0.0)
        energy = float((e_day * loss).sum())
        share = energy / float(e_day.sum()) if e_day.sum() > 0 else 0.0
        intervals, recs = [], []
        for a_i, b_i, sel_i, f in g:
            r = rec_at.get(b_i)
            lo_r = float(1 - ratio[sel_i].iloc[-1])
            placed = bool(f.get("placed"))
            intervals.append({"from": a_i.date(), "onset": f["onset"], "to": b_i.date(),
                              "rate_pct_per_day": 100 * f["rate"],
                              "rate_ci95_pct_per_day": [100 * f["rate_low"],
                                                        100 * f["rate_high"]],
                              "whole_interval_theil_sen_pct_per_day":
                                  None if placed else 100 * f["slope"],
                              "kendall_p_value": None if placed else f["p_value"] / 2,
                              "placed_by": "the episode's rate, optimal partitioning" if placed
                              else "Kendall test", "days": f["n"]})
            if r is not None:
                recs.append({"at": b_i.date(), "cause": r["cause"], "rain_mm": r["rain_mm"],
                             "soiling_loss_pct_before": 100 * lo_r,
                             "detected_step_pct": None if r["detected_step"] is None
                             else 100 * r["detected_step"]})
        # band: the fitted rates' 95 % intervals, scaled on the loss, plus the model error,
        # the clean level's error (:func:`level_error`), and the placed ramps' edges
        # (:func:`edge_ranges`), their 95 % half-widths added in quadrature
        rel = rate_widen * np.nanmean([abs((f["rate_high"] - f["rate_low"])
                                           / (2 * 1.96 * f["rate"]))
                                       for *_, f in g if f["rate"] != 0])
        low, high = energy_band(energy, float(np.hypot(rel, rel_sigma)),
                                _level_sigma_kwh(e_day, level_se))
        edges = np.array([f["edge_kwh"] for *_, f in g if "edge_kwh" in f]).reshape(-1, 2)
        low = energy - float(np.hypot(energy - low, np.sqrt(np.sum(edges[:, 0] ** 2))))
        high = energy + float(np.hypot(high - energy, np.sqrt(np.sum(edges[:, 1] ** 2))))
        savings = {}
        for a_i, b_i, _sel, f in g:
            for k in range(7, int((b_i - a_i).days), 7):
                day = a_i + pd.Timedelta(days=k)
                savings[day.date().isoformat()] = cleaning_saving_kwh(
                    ratio, exp_daily, day, b_i, f["rate"])
        start = pd.Timestamp(a).tz_localize(w.tz).tz_convert("UTC")
        end = pd.Timestamp(b).tz_localize(w.tz).tz_convert("UTC")
        ev = Event(kind="soiling", scope="plant", start=start, end=end, energy_loss_kwh=energy,
                   energy_loss_kwh_low=max(0.0, low), energy_loss_kwh_high=high,
                   method=METHOD,
                   evidence={"test": "Theil-Sen slope, Kendall tau (one-sided)",
                             "intervals": intervals},
                   detail={"loss_pct_of_expected": 100 * share, "recoveries": recs,
                           "cleaning_saving_kwh_by_date": savings})
        events.append(ev)
        rows = np.flatnonzero((days_of >= np.datetime64(a)) & (days_of < np.datetime64(b)))
        lo, hi = int(rows[0]), int(rows[-1]) + 1
        f_int = (1 - ratio).reindex(days_of[lo:hi]).fillna(0.0).to_numpy()
        prints.append(Footprint(ev, lo, hi, w.inverters,
                                factor=np.repeat(f_int[:, None], len(w.inverters), axis=1)))
    return events, prints


def sawtooth_sums(y: np.ndarray, level: np.ndarray, rate: float):
    """Sums of squares of a daily index ``y`` (NaN: no day) about its clean ``level`` (per
    day) and about a ramp that loses ``rate`` of the level per day from a wash (Kimber et al.
    2006: the loss grows linearly from each wash). Returns ``clean(i, j)`` and ``ramp(i,
    j)``, the sums over the days [i, j) (arrays broadcast), a ramp washed at the start of day
    i, a day standing for its middle (age t - i + 0.5 days)."""
    ok = np.isfinite(y) & np.isfinite(level)
    u = np.where(ok, y - level, 0.0)
    v = np.where(ok, level * rate, 0.0)
    t = np.arange(len(y)) + 0.5

    def cum(x: np.ndarray) -> np.ndarray:
        return np.concatenate([[0.0], np.cumsum(x)])

    uu, uv, uvt = cum(u * u), cum(u * v), cum(u * v * t)
    vv, vvt, vvtt = cum(v * v), cum(v * v * t), cum(v * v * t * t)

    def clean(i, j):
        return uu[j] - uu[i]

    def ramp(i, j):
        i = np.asarray(i, dtype=float)
        ii, jj = i.astype(int), np.asarray(j, dtype=int)
        d = lambda c: c[jj] - c[ii]  # noqa: E731
        return (d(uu) + 2 * (d(uvt) - i * d(uv))
                + d(vvtt) - 2 * i * d(vvt) + i * i * d(vv))

    return clean, ramp


def ramp_penalty(n: int, alpha: float) -> float:
    """The least drop of the sum of squares, in units of the noise variance v, for which a
    ramp is placed among ``n`` days: one that noise alone exceeds with probability at most
    ``alpha`` over all n (n + 1) / 2 ramps the days hold (Bonferroni).

    A ramp of fixed shape s lowers the sum of squares of noise u by 2 u.s - |s|^2; with u
    normal of variance v this exceeds p v with probability Q((a^2 + p) / (2 a)), a =
    |s| / sqrt(v), Q the normal tail. That is largest for a = sqrt(p), at Q(sqrt(p)); so p =
    Q^-1(alpha / m)^2 holds the rate for ramps of every size. ``v`` is the long-run variance
    (:func:`long_run_variance`): days in a row share their error."""
    m = max(1.0, n * (n + 1) / 2)
    return float(stats.norm.isf(alpha / m) ** 2)


def _segments(spans: list[tuple[int, int]], n: int) -> list[tuple[int, int, bool]]:
    """The days [0, n) as segments (start, end, is a ramp): the ramps ``spans`` and the clean
    days between and beside them (a clean segment may be empty at either end)."""
    out, at = [], 0
    for a, b in spans:
        if a > at or not out:
            out.append((at, a, False))
        out.append((a, b, True))
        at = b
    out.append((at, n, False))
    return out


def edge_ranges(y: np.ndarray, level: np.ndarray, rate: float, spans: list[tuple[int, int]],
                forward: bool, energy: np.ndarray, var: float, level_95: float = LR_95
                ) -> list[tuple[float, float]]:
    """How far each ramp's soiling energy could move with the days it starts or ends, the
    other boundaries held: per ramp (start, end) of ``spans`` (:func:`sawtooth_extent`, same
    ``y``, ``level``, ``rate``, ``forward``), (down, up) [kWh] of the energy of the two
    segments beside each of its free boundaries over the positions whose sum of squares
    (:func:`sawtooth_sums`) is within ``level_95`` times the noise variance ``var`` of the
    least: the likelihood-ratio set of a change-point, chi-square with 1 degree of freedom
    at 95 % (Hinkley 1970, "Inference about the change-point in a sequence of random
    variables", Biometrika 57(1):1; the chi-square is an approximation there, from memory).

    Every boundary between two segments (:func:`_segments`) is free but the one at the
    episode (day 0 where the ramps follow it, day n where they precede it): it belongs to
    the ramp beside it, and between two ramps to the one farther from the episode (the
    earlier where they follow it, the later where they precede it). A ramp's ranges from
    its boundaries add in quadrature. A wash the data cannot rule out inside a ramp (one
    more boundary, by the same set) lowers its energy too. ``energy``: the expected energy
    per day [kWh]; a ramp loses ``rate`` (t - start + 0.5) of a day's."""
    if not spans:
        return []
    clean, ramp = sawtooth_sums(y, level, rate)
    e = np.concatenate([[0.0], np.cumsum(energy)])
    et = np.concatenate([[0.0], np.cumsum(energy * (np.arange(len(energy)) + 0.5))])

    def lost(i, j):  # a ramp's soiling energy over [i, j), washed at the start of day i
        i, j = np.asarray(i), np.asarray(j)
        return rate * (et[j] - et[i] - i * (e[j] - e[i]))

    def seg(i, j, is_ramp):  # (sum of squares, soiling energy) of a segment
        return (ramp(i, j), lost(i, j)) if is_ramp else (clean(i, j), 0.0 * np.asarray(j))

    n = len(y)
    segs = _segments(spans, n)
    ramp_at = {(a, b): k for k, (a, b) in enumerate(spans)}
    parts: list[list[tuple[float, float]]] = [[] for _ in spans]
    for (p, x, left), (_x, q, right) in zip(segs[:-1], segs[1:], strict=True):
        if x == (0 if forward else n):
            continue
        owner = ramp_at[(p, x)] if left and (forward or not right) else ramp_at[(x, q)]
        c = np.arange(p + left, q - right + 1)
        s1, e1 = seg(p, c, left)
        s2, e2 = seg(c, q, right)
        sse, en = s1 + s2, e1 + e2
        ok = sse <= np.min(sse) + level_95 * var
        here = float(en[c == x][0])
        parts[owner].append((max(0.0, here - float(en[ok].min())),
                             max(0.0, float(en[ok].max()) - here)))
    out = []
    for k, (i, j) in enumerate(spans):
        down = float(np.sqrt(sum(d * d for d, _ in parts[k])))
        up = float(np.sqrt(sum(u * u for _, u in parts[k])))
        c = np.arange(i + 1, j)  # a wash inside the ramp too small to place
        if len(c):
            sse, whole = ramp(i, c) + ramp(c, j), float(ramp(i, j))
            ok = sse <= min(float(np.min(sse)), whole) + level_95 * var
            if ok.any():
                split = float(lost(i, j)) - float(np.min((lost(i, c) + lost(c, j))[ok]))
                down = float(np.hypot(down, max(0.0, split)))
        out.append((down, up))
    return out


def sawtooth_extent(y: np.ndarray, level: np.ndarray, rate: float, penalty: float,
                    forward: bool, gap_cost: float, max_gap: int = 30
                    ) -> list[tuple[int, int]]:
    """Where the soiling of a found episode reaches into the days ``y`` beside it, as ramps
    at the episode's ``rate`` (the episode's rate holds for the site's dust, Kimber et al.
    2006), each from a wash, with clean days between them where a wash left the modules
    clean for a while or a ramp too small to see: optimal partitioning (Jackson et al. 2005)
    into ramps and clean stretches, each ramp costing ``penalty`` (the noise variance times
    :func:`ramp_penalty`, which holds the false-alarm rate over every ramp the days could
    hold) and lowering the sum of squares (:func:`sawtooth_sums`) about the clean ``level``
    (per day: the model's error drifts with the season) by more than that. Two clean
    stretches never meet (they are one); one between ramps, or between the episode and a
    ramp, costs ``gap_cost`` (its end is one more change-point: the noise variance times
    3.841, the chi-square of 1 degree of freedom at 95 %, stands a clean stretch only where
    the data rule out the ramps without it, as in :func:`edge_ranges`; a clean stretch does
    not add to the false alarms, which ``penalty`` holds over every ramp's position) and
    is at most ``max_gap`` days: half the window of the clean level (61 days,
    :func:`_extend`), so that the ramps on both sides of it are held to a level of the same
    days (a season away the model's own seasonal error could pass for a ramp).

    ``forward``: the days follow the episode (day 0 is its last recovery; clean after the
    last ramp); else they precede it (day n is its onset; clean before the first ramp).
    Returns the ramps as (start, end) positions in ``y``, in order; an empty list for none.
    """
    n = len(y)
    if n == 0 or not rate > 0:
        return []
    clean, ramp = sawtooth_sums(y, level, rate)
    # best[s][x]: the least cost of the days on the episode's side of boundary x, the segment
    # at x on that side a ramp (s = 0; the episode itself counts as one) or clean (s = 1)
    best = np.full((2, n + 1), np.inf)
    link = np.zeros((2, n + 1), dtype=int)
    state = np.zeros(n + 1, dtype=int)
    pos = np.arange(n + 1)
    if forward:
        best[0, 0] = 0.0
        for j in range(1, n + 1):
            either = np.minimum(best[0, :j], best[1, :j])
            c = either + ramp(pos[:j], j) + penalty
            link[0, j] = int(np.argmin(c))
            best[0, j] = c[link[0, j]]
            state[j] = int(best[1, link[0, j]] < best[0, link[0, j]])
            g = max(0, j - max_gap)
            c = best[0, g:j] + clean(pos[g:j], j) + gap_cost
            link[1, j] = g + int(np.argmin(c))
            best[1, j] = c[link[1, j] - g]
        x = int(np.argmin(best[0] + clean(pos, n)))
        spans: list[tuple[int, int]] = []
        s = 0
        while x > 0:
            i = int(link[s, x])
            if s == 0:
                spans.append((i, x))
            s, x = (state[x] if s == 0 else 0), i
        return spans[::-1]
    best[0, n] = 0.0
    for i in range(n - 1, -1, -1):
        either = np.minimum(best[0, i + 1:], best[1, i + 1:])
        c = ramp(i, pos[i + 1:]) + penalty + either
        k = int(np.argmin(c))
        link[0, i], best[0, i] = i + 1 + k, c[k]
        state[i] = int(best[1, i + 1 + k] < best[0, i + 1 + k])
        g = min(n, i + max_gap) + 1
        c = clean(i, pos[i + 1:g]) + gap_cost + best[0, i + 1:g]
        k = int(np.argmin(c))
        link[1, i], best[1, i] = i + 1 + k, c[k]
    x = int(np.argmin(clean(0, pos) + best[0]))
    spans = []
    s = 0
    while x < n:
        j = int(link[s, x])
        if s == 0:
            spans.append((x, j))
        s, x = (state[x] if s == 0 else 0), j
    return spans
