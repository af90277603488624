"""Irradiance sensor faults: the plane-of-array sensor drifting, reading off, or stuck.

The inverters the sensor drives (:func:`driven_columns`: those it feeds and, where no GHI is
logged, every inverter, their plane irradiance being the sensor's decomposed and transposed)
see a sensor that reads a factor f off all together: their expected power moves by f, their
daily performance index by 1/f. Where GHI is logged and the sensor feeds only some arrays of
each inverter (arrays in several planes, e.g. east-west), the inverters it feeds in part stand
for them, their index moving by about f to the power of the sensor's share (see :func:`find`).
A plant fault moves one inverter, or builds up (soiling), or is left to its own detector; the
sensor is blamed only where an independent reference agrees.

* Step or drift ending in a reset, against the module temperature (:func:`reset_faults`):
  the sensor against the irradiance its module temperature implies (King et al. 2004 eq. 11
  solved for the irradiance, :func:`perfcheck.physics.poa_from_module_temperature`), a
  reference on every day whatever the sky, is segmented likewise; behind each step back
  towards the usual level a step or a straight drift is fitted with the driven inverters'
  index (:func:`reset_fit`: two-phase regression over each reference's own level, or level
  and slope, the Schwarz criterion choosing; the onset with its profile-likelihood
  interval and, for a drift, its standard error: a slow drift's onset is a kink that the
  daily noise places to within days, not to the day), kept when significant and mirrored
  by the index at the reset (the index there less what the day's light explains,
  :func:`_light_adjusted`). A sensor reading a few % low for a month is found so even
  without a clear day.
* Level, from the power (:func:`power_faults`): the driven inverters' daily log index (less
  the other inverters' where some do not depend on the sensor) is segmented every day by
  circular binary segmentation (:func:`perfcheck.detect.common.change_points`, false-alarm
  probability ``alpha`` per split); a segment that differs from as many days on either side
  by a Welch t-test p-value below ``alpha`` and by at least ``min_shift``, with a step at each
  edge, is a candidate, confirmed when the sensor against its clear-sky plane irradiance on
  clear days moved the other way by half to twice as much (one-sided Welch at
  ``CONFIRM_ALPHA``, steps at the edges too).
* Level, from the sensor (:func:`level_faults`): the same ratio to the clear-sky irradiance on
  clear days, segmented likewise, confirmed when the driven inverters' index mirrors it
  (:func:`_mirrored`): the clear-sky reference has seasonal errors of a few % that the power
  does not mirror. Its edges are placed on the day by every day's index (or the sensor
  against the POA transposed from GHI).
* Stuck: the same non-zero value (or zero while the reference shows daylight) for at least
  ``min_stuck_minutes`` in a row. Measured irradiance changes from one interval to the next
  (noise, sun motion), so an identical run of that length does not occur by chance.

When the sensor is suspect, :func:`corrected` rebuilds the expected power of the driven
inverters in those windows (from GHI where it is logged, else divided by the sensor's error
per day as the power shows it), so the fault costs no energy in the ledger.
``min_shift`` 2 %: about the daily uncertainty of a class A pyranometer (IEC 61724-1), from
memory; ``alpha`` 1e-3.

References
----------
Olshen, Venkatraman, Lucito & Wigler 2004 (circular binary segmentation); Welch 1947
(Biometrika 34:28, unequal-variance t test); Ineichen & Perez 2002 (clear sky); Sen 1968
(Theil-Sen line of a drift); Hinkley 1969 (Biometrika 56:495) and 1971 (JASA 66:736),
two-phase regression; Feder 1975 (Ann. Statist. 3:49, segmented regression asymptotics);
Schwarz 1978 (Ann. Statist. 6:461, BIC); all from memory. King, Boyson & Kratochvil 2004,
SAND2004-3535, eq. 11 (module temperature).
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pandas as pd

from perfcheck.detect.common import (
    Event,
    Wide,
    change_points,
    daily_pi,
    day_light,
    daylight,
    despike,
    light_adjusted,
    long_run_sigma,
    robust_sigma,
    runs,
    segmented,
    window_change,
)
from perfcheck.lazy import lazy_module

stats = lazy_module("scipy.stats")

METHOD = ("the sensor-driven inverters' daily index, the POA sensor against clear-sky POA "
          "on clear days and against the irradiance its module temperature implies: circular "
          "binary segmentation (Olshen et al. 2004), Welch t tests and two-phase regression "
          "(Hinkley 1969, 1971; Schwarz criterion), each confirmed by another; identical-value "
          "runs for stuck readings")


# confirmation of a candidate found in the power by an independent reference: the span
# around the window it is compared with (a month: the clear-sky reference's seasonal error
# is small over it, common practice) and the one-sided level of that second test (the
# usual 5 %, common practice)
CONFIRM_SPAN_DAYS = 30
CONFIRM_ALPHA = 0.05
# and the fewest days on each side of that test (below five a t test rests on a normality
# it cannot check and a single odd clear day decides it: common practice)
CONFIRM_MIN_DAYS = 5


@dataclasses.dataclass(frozen=True)
class Suspect:
    start: pd.Timestamp  # UTC, inclusive
    end: pd.Timestamp  # UTC, exclusive
    mode: str  # 'level' or 'stuck'
    factor: float  # sensor / reference over the window (level), nan for stuck
    evidence: dict[str, Any]
    daily_factor: pd.Series | None = None  # sensor / truth per site-local day (from the power)
    # inverter -> share of its plane irradiance that is the sensor's reading, where the sensor
    # feeds only some of its arrays (None: the inverters of driven_columns, whole)
    shares: dict[str, float] | None = None


def sensor_columns(w: Wide) -> list[str]:
    """Inverters whose plane irradiance is mostly the sensor's reading."""
    day = w.zenith < 80
    share = w.from_sensor[day.to_numpy()].mean()
    return [c for c in w.inverters if share.get(c, 0) > 0.5]


def refine_edge(x: pd.Series, lo: pd.Timestamp, hi: pd.Timestamp, context_days: int = 3
                ) -> pd.Timestamp:
    """The day in (lo, hi] where the level of ``x`` (one value per day) changes.

    ``lo`` is the last day known to be on the old level, ``hi`` the first known on the new one.
    The change is placed by a single least-absolute-deviation split with free levels over the
    days from ``lo`` - ``context_days`` to ``hi`` + ``context_days``, restricted to (lo, hi].
    """
    seg = x[(x.index > lo - pd.Timedelta(days=context_days))
            & (x.index <= hi + pd.Timedelta(days=context_days))].dropna()
    cand = [i for i, d in enumerate(seg.index) if lo < d <= hi]
    if not cand:
        return hi
    v = seg.to_numpy()
    best, best_cost = hi, np.inf
    for i in cand:
        left, right = v[:i], v[i:]
        if len(left) == 0 or len(right) == 0:
            continue
        cost = np.abs(left - np.median(left)).sum() + np.abs(right - np.median(right)).sum()
        if cost < best_cost:
            best_cost, best = cost, seg.index[i]
    return best


def _daily_log_ratio(w: Wide, a: pd.Series, b: pd.Series) -> pd.Series:
    ok = (w.zenith < 80) & a.notna() & b.notna() & (b > 0)
    days = w.day.to_numpy()
    s = a.where(ok).groupby(days).sum(min_count=1)
    r = b.where(ok).groupby(days).sum(min_count=1)
    return np.log((s / r).where((r >= 0.25 * r.median()) & (s > 0)))


def level_faults(w: Wide, sensor: pd.Series, reference: pd.Series, clear: pd.Series,
                 every_day: pd.Series, alpha: float = 1e-3, min_shift: float = 0.02,
                 min_days: int = 3) -> list[Suspect]:
    """Level faults of the sensor against the clear-sky irradiance in its plane on clear days
    (see module docstring); ``every_day`` is a daily log ratio usable on every day (the sensor
    against the POA modelled from GHI), used to place the window's edges."""
    q_all = _daily_log_ratio(w, sensor, reference)
    q = q_all[clear.reindex(q_all.index).fillna(False).astype(bool)].dropna()
    cut = segmented(q, alpha, min_days)
    if cut is None:
        return []
    x, segs, ref = cut
    out = []
    for g in segs:
        if g is ref:
            continue
        xs, xr = x[g.start:g.stop], x[ref.start:ref.stop]
        t = stats.ttest_ind(xs, xr, equal_var=False)
        shift = float(np.exp(g.mean - ref.mean) - 1)
        if not (t.pvalue < alpha and abs(shift) >= min_shift):
            continue
        # a sensor fault starts (and ends) with a step; a seasonal drift of the reference
        # does not: every inner edge must carry at least half the segment's change
        if any(abs(st) < 0.5 * abs(g.mean - ref.mean) for st in _edges(x, g.start, g.stop,
                                                                    min_days)):
            continue
        first, last = q.index[g.start], q.index[g.stop - 1]
        prev = q.index[g.start - 1] if g.start > 0 else q_all.index[0] - pd.Timedelta(days=1)
        nxt = q.index[g.stop] if g.stop < len(q) else q_all.index[-1]
        d0 = refine_edge(every_day, prev, first)
        d1 = refine_edge(every_day, last, nxt)
        out.append(Suspect(
            start=pd.Timestamp(d0).tz_localize(w.tz).tz_convert("UTC"),
            end=pd.Timestamp(d1).tz_localize(w.tz).tz_convert("UTC"),
            mode="level", factor=float(np.exp(g.mean - ref.mean)),
            evidence={"test": "Welch t", "p_value": float(t.pvalue), "t": float(t.statistic),
                      "clear_days": int(len(xs)), "reference_clear_days": int(len(xr)),
                      "sensor_vs_reference_change_pct": 100 * shift}))
    return out


def _date_edges(x: pd.Series, d0: pd.Timestamp, d1: pd.Timestamp, k: int) -> list[float]:
    """Change of a daily series across the edges of [d0, d1) (medians of the k nearest
    values each side), for the edges with values on both sides."""
    x = x.dropna()
    pos0, pos1 = x.index.searchsorted(d0), x.index.searchsorted(d1)
    return _edges(x.to_numpy(), pos0, pos1, k) if pos1 > pos0 else []


def _edges(x: np.ndarray, start: int, stop: int, k: int) -> list[float]:
    """Log change across each inner edge of x[start:stop] (medians of k values each side)."""
    out = []
    if start > 0:
        out.append(float(np.median(x[start:start + k]) - np.median(x[max(0, start - k):start])))
    if stop < len(x):
        out.append(float(np.median(x[max(start, stop - k):stop]) - np.median(x[stop:stop + k])))
    return out


def reset_fit(x: pd.Series, lo: pd.Timestamp, reset: pd.Timestamp, min_days: int = 3,
              mirror: pd.Series | None = None, level: float = 0.95,
              onset: pd.Timestamp | None = None, shape: str | None = None
              ) -> dict[str, Any] | None:
    """Least-squares fit of a sensor error that ends in a reset: ``x`` (one value per day)
    over the days [lo, reset) as the reference's own course b(t) plus d h(t) with an onset t0,
    h 0 before t0 and from it either 1 (a step) or (t - t0) / (reset - t0) (a drift: a
    straight line from the usual course to d above it on the day before the reset).

    b(t) is a level c, or a level and a slope: an independent reference errs with the season
    (a thermal model with the wind and the sky, the power model with the sun's path) by
    about as much as a slow drift moves it over weeks, and a level alone then bends the fit
    towards the seasonal course. The drift shape with a sloping b is the continuous two-phase
    (hinge) regression, where the onset is the day the slope changes. Of the two courses the
    one with the smaller Schwarz criterion (BIC, n log(SSE / n) + k log n) is kept; the
    shapes have the same parameters, so of those the smaller residual sum of squares.

    ``mirror``, if given, is a second daily series that the same error moves by -d (the
    sensor-fed inverters' log index): it is fitted jointly with a course of its own and
    -d h(t), each series weighted by its inverse long-run variance over the span
    (:func:`perfcheck.detect.common.long_run_sigma`), so that two pieces of evidence with
    errors of their own place the onset together. The long-run variance, not the day-to-day
    one, because what moves a kink is an error that persists over weeks: the inverters' index
    wanders with the season and the sky (the power model's own errors), and weighted by its
    daily scatter alone it would bend the onset towards its own wander as much as the
    sensor's steadier reference fixes it (weighted least squares with the noise's variance at
    the frequencies that matter; Hamilton 1994, sec. 7.2, from memory). Every onset at least
    ``min_days`` days inside the span is tried (the profile of the residual sum of squares
    over t0). Given ``onset`` and ``shape`` (a fault placed already), only they are fitted:
    the size of that fault against one series alone.

    Returns the shape, the course (``"level"`` or ``"slope"``), the onset, c (the level of
    ``x``'s course at the reset), d, the standard error of d from the standardised
    residuals' long-run variance (:func:`perfcheck.detect.common.long_run_sigma`,
    autocorrelation-aware), and the onset's ``level`` confidence interval (``onset_low``,
    ``onset_high``: the onsets whose residual sum of squares exceeds the least by at most the
    chi-square quantile with one degree of freedom times the long-run variance, the profile
    likelihood interval; asymptotically valid for the continuous join, Feder 1975, and
    approximate for a step, whose onset is placed to within a day or two), and for a drift
    the onset's standard error ``onset_se_days`` (None for a step): the delta method, the
    long-run variance times the inverse information of the fit with the onset's own column
    (d times the derivative of h in t0) added (Hinkley 1971). None when the span is too short.

    A drift's onset is a kink, not a step, and its placing has a statistical limit: for one
    series with a level course the standard error is about (sigma_LR / beta)
    sqrt(1 / n1 + 4 / n2), beta the drift per day, n1 and n2 the days before and after the
    onset (the onset's column is the jump between the level before and the line after, met
    at the onset; a line's end over n2 days has variance 4 sigma^2 / n2). A drift of 5 % over
    100 days (0.05 %/day) against 1 % of daily noise, 100 days each side, gives about 4.5
    days; the index of the inverters adds its own evidence but has noise and seasonal errors
    of its own. An onset to the day is then below what the data can tell, and a reference's
    seasonal error of a few % over the months before the onset moves it by more (a bias the
    standard error does not include). At writing, 60 invented drifts of 5 % over 61 days
    (noise as in tests/test_sensor_reset.py) scattered by 4.7 days around the onset against
    a median standard error of 3.8: the asymptotic value is somewhat optimistic at this size,
    and the profile interval is the one to quote.

    References
    ----------
    Hinkley 1969, Biometrika 56(3):495 (two-phase regression with an unknown join point);
    Hinkley 1971, JASA 66(336):736 (inference in two-phase regression, continuous join);
    Feder 1975, Ann. Statist. 3(1):49 (asymptotics of segmented regression: the join's
    likelihood ratio); Schwarz 1978, Ann. Statist. 6(2):461 (BIC); Hamilton 1994, Time Series
    Analysis, sec. 7.2 (long-run variance); all from memory.
    """
    parts = [(x, 1.0)] + ([] if mirror is None else [(mirror, -1.0)])
    cut = [p[(p.index >= lo) & (p.index < reset)].dropna() for p, _ in parts]
    if len(cut[0]) < 3 * min_days:
        return None
    cut = [c if len(c) >= 3 * min_days else c.iloc[:0] for c in cut]
    t = [((c.index - reset) / pd.Timedelta(days=1)).to_numpy(dtype=float) for c in cut]
    wt = [1 / max(long_run_sigma(c.to_numpy())[0], 1e-6) if len(c) else 0.0 for c in cut]
    v = np.concatenate([c.to_numpy() * k for c, k in zip(cut, wt, strict=True)])
    n = len(v)
    # per series a level and a slope in days before the reset, each on its own rows
    level_cols = np.zeros((n, len(cut)))
    slope_cols = np.zeros((n, len(cut)))
    row = 0
    for i, (c, k) in enumerate(zip(cut, wt, strict=True)):
        level_cols[row:row + len(c), i] = k
        slope_cols[row:row + len(c), i] = k * t[i]
        row += len(c)
    used = [i for i, c in enumerate(cut) if len(c)]
    courses = {"level": level_cols[:, used],
               "slope": np.column_stack([level_cols[:, used], slope_cols[:, used]])}
    sign = np.concatenate([np.full(len(c), g * k) for c, (_, g), k in zip(cut, parts, wt,
                                                                         strict=True)])
    tt = np.concatenate(t)
    onsets = list(range(min_days, len(cut[0]) - min_days + 1))
    if onset is not None:
        onsets = [k for k in onsets if cut[0].index[k] == onset]
        if not onsets:
            return None
    fits = {}
    for course, base in courses.items():
        best: dict[str, Any] = {"sse": np.inf}
        profile = {"drift": np.full(len(onsets), np.inf), "step": np.full(len(onsets), np.inf)}
        for j, k in enumerate(onsets):
            t0 = t[0][k]
            for form, h in (("drift", np.clip((tt - t0) / -t0, 0.0, None)),
                            ("step", (tt >= t0).astype(float))):
                if shape is not None and form != shape:
                    continue
                a = np.column_stack([base, sign * h])
                coef, *_ = np.linalg.lstsq(a, v, rcond=None)
                resid = v - a @ coef
                sse = float(resid @ resid)
                profile[form][j] = sse
                if sse < best["sse"]:
                    best = {"sse": sse, "shape": form, "onset": cut[0].index[k],
                            "c": float(coef[0] / wt[0]), "d": float(coef[-1]), "a": a,
                            "resid": resid, "t0": t0}
        best["course"], best["profile"] = course, profile[best["shape"]]
        best["bic"] = n * np.log(max(best["sse"], 1e-300) / n) + (base.shape[1] + 2) * np.log(n)
        fits[course] = best
    best = min(fits.values(), key=lambda f: f["bic"])
    a, resid, profile = best.pop("a"), best.pop("resid"), best.pop("profile")
    t0 = best.pop("t0")
    sig, _ = long_run_sigma(resid)
    best["se_d"] = float(sig * np.sqrt(np.linalg.pinv(a.T @ a)[-1, -1]))
    best["onset_se_days"] = None
    if best["shape"] == "drift":
        # the onset's standard error (delta method): the fit's Jacobian with the column of
        # the onset added, d times the derivative of h = 1 - t / t0 (after t0) in t0
        dh = np.where(tt > t0, tt / t0 ** 2, 0.0)
        j = np.column_stack([a, sign * best["d"] * dh])
        best["onset_se_days"] = float(sig * np.sqrt(np.linalg.pinv(j.T @ j)[-1, -1]))
    near = np.flatnonzero(profile - best["sse"] <= stats.chi2.ppf(level, 1) * sig ** 2)
    best["onset_low"] = cut[0].index[onsets[near.min()]]
    best["onset_high"] = cut[0].index[onsets[near.max()]]
    del best["bic"]
    return best


def reset_faults(w: Wide, x: pd.Series, pi_fed: pd.Series, alpha: float = 1e-3,
                 min_shift: float = 0.02, min_days: int = 3,
                 pi_steps: pd.Series | None = None) -> list[Suspect]:
    """Steps and drifts of the sensor against an every-day reference, each ending in a reset.

    ``x`` is the daily log ratio of the sensor to an independent reference. A faulty sensor
    comes back to its usual level at once when it is cleaned, recalibrated or swapped, while
    it may have left it slowly (a drift), so the faults are looked for behind each reset: a
    step between two segments of circular binary segmentation (:func:`change_points`,
    false-alarm probability ``alpha`` per split) of at least ``min_shift``, towards the usual
    level (the series' median), reaching it or going past it: the reference may read off the
    other way for a few days just after the reset (snow or frost on the modules), and such a
    spell, a segment of its own, must not hide the reset. The segment before the reset must
    lie off the usual level by at least half of ``min_shift``: it holds the fault's last days,
    and a fault counts only where it reaches ``min_shift`` (the last stretch of a straight
    drift averages at least half its end value). A step from the usual level out past it is
    a fault's onset, not a reset. Over the days since the last fault found (or the first
    day), :func:`reset_fit` places the onset and chooses the shape, with the inverters' index
    or, where another fault moves the index, on the reference alone (:func:`_placed`). The
    fault is kept when its size d is significant (two-sided normal p-value of d over its
    long-run standard error below ``alpha``), its fitted error reaches ``min_shift`` on some
    day, and the sensor-fed inverters' daily index steps the other way at the reset by half
    to twice d, within its noise (medians of ``min_days`` days either side,
    :func:`_mirror_step`): a reference that errs with the season has no such step in the
    power. The step is read on ``pi_steps`` (default ``pi_fed``), the index less what the
    day's light explains (:func:`_light_adjusted`): over so few days, a run of dull days
    beside the reset moves a lone inverter's index by as much as the sensor's fault. The
    false-alarm probability is at most that of the segmentation's split, ``alpha``
    (independent noise; day-to-day persistence raises it), and the mirrored step can only
    lower it.

    The window runs from the fitted onset (for a drift, where the fitted line leaves the
    usual level) to the reset; the evidence gives the first day the fitted error reaches
    ``min_shift`` (from there a drift is detectable on its own), the onset's 95 % interval
    and standard error (:func:`reset_fit`), and ``daily_factor`` the fitted error per day.
    """
    b = x.dropna()
    if len(b) < 4 * min_days:
        return []
    v = despike(b.to_numpy())
    xs = pd.Series(v, index=b.index)
    # a segment shorter than min_days is an outlier the segmentation cut out, not a level
    segs = [g for g in change_points(v, alpha=alpha, min_size=min_days)
            if g.stop - g.start >= min_days]
    usual, big = float(np.median(v)), np.log1p(min_shift)
    y = pi_fed.dropna()
    y_clean = pd.Series(despike(y.to_numpy()), index=y.index)
    if pi_steps is not None:
        y = pi_steps.dropna()
    # the standard error of the index's step at a reset: the difference of two medians of
    # min_days days, each of variance about pi sigma^2 / (2 n) (the median's asymptotic
    # efficiency; Kendall & Stuart, from memory), sigma the index's day-to-day scale
    se_step = robust_sigma(despike(y.to_numpy())) * np.sqrt(np.pi / min_days)
    out = []
    since = b.index[0]
    for k in range(len(segs) - 1):
        before, after = segs[k].mean - usual, segs[k + 1].mean - usual
        if not (abs(before - after) >= big and np.sign(before - after) == np.sign(before)
                and abs(before) >= big / 2):
            continue
        reset = b.index[segs[k + 1].start]
        placed = _placed(xs, y_clean, since, reset, min_days, before, alpha)
        if placed is None:
            continue
        fit, d, p = placed
        # the index's change across the reset (before less after), against the sensor's d
        pre = y[y.index < reset].to_numpy()[-min_days:]
        post = y[y.index >= reset].to_numpy()[:min_days]
        if len(pre) < min_days or len(post) < min_days:
            continue
        fed = float(np.median(pre) - np.median(post))
        if not _mirror_step(fed, d, se_step):
            continue
        every = pd.date_range(fit["onset"], reset - pd.Timedelta(days=1), freq="D")
        h = np.ones(len(every))
        if fit["shape"] == "drift":
            h = ((every - fit["onset"]) / (reset - fit["onset"])).to_numpy(dtype=float)
        detectable = every[np.abs(d * h) >= big]
        if not len(detectable):  # the fitted error never reaches the size that counts
            continue
        since = reset
        out.append(Suspect(
            start=pd.Timestamp(fit["onset"]).tz_localize(w.tz).tz_convert("UTC"),
            end=pd.Timestamp(reset).tz_localize(w.tz).tz_convert("UTC"),
            mode="level", factor=float(np.exp(d)), daily_factor=pd.Series(np.exp(d * h),
                                                                          index=every),
            evidence={"test": "two-phase regression ending in a reset", "shape": fit["shape"],
                      "reference_course": fit["course"],
                      "onset_95_from": str(fit["onset_low"].date()),
                      "onset_95_to": str(fit["onset_high"].date()),
                      "onset_se_days": fit["onset_se_days"],
                      "p_value": p, "days": int(len(every)),
                      "sensor_vs_reference_change_pct": 100 * float(np.expm1(d)),
                      "detectable_from": str(detectable[0].date()),
                      "detectable_pct": 100 * min_shift,
                      "fed_inverters_index_step_pct": 100 * float(np.expm1(fed))}))
    return out


def _placed(xs: pd.Series, mirror: pd.Series, since: pd.Timestamp, reset: pd.Timestamp,
            min_days: int, before: float, alpha: float
            ) -> tuple[dict[str, Any], float, float] | None:
    """The fault behind a reset: the fit that places it (:func:`reset_fit`), its size d (log)
    against the sensor's reference ``xs`` alone, and d's two-sided p-value; None when no
    fault of the sign of ``before`` (the segment before the reset) is significant at
    ``alpha``.

    The onset and shape are placed by the reference and the inverters' index ``mirror``
    together, and d is then read on the reference alone, at that onset and in that shape:
    the index's own course over the season (the power model's errors) must not bend it.
    The joint fit assumes that nothing but the sensor moves the index over the span; where
    another fault does (heavy soiling and the rain that washes it), the joint onset follows
    that fault instead, and the reference shows no fault of the right sign there. The
    reference alone then places the fault, under the same tests.
    """
    for joint in (True, False):
        fit = reset_fit(xs, since, reset, min_days, mirror=mirror if joint else None)
        if fit is None:
            return None
        own = (fit if not joint else
               reset_fit(xs, since, reset, min_days, onset=fit["onset"], shape=fit["shape"]))
        if own is None:
            continue
        d = own["d"]
        p = float(2 * stats.norm.sf(abs(d) / own["se_d"])) if own["se_d"] > 0 else 0.0
        if np.sign(d) == np.sign(before) and p < alpha:
            return fit, d, p
    return None


def _mirror_step(fed: float, d: float, se: float) -> bool:
    """Whether the sensor-fed inverters' index steps at a reset as a sensor fault of size
    ``d`` (log) makes it: the other way, by at least half of d and at most twice d (common
    practice, as in :func:`power_faults`), the upper bound allowing for the step's own
    standard error ``se`` (one-sided at ``CONFIRM_ALPHA``).

    The lower bound is the confirmation and stays as it is. The upper one only turns away a
    step too large to be the sensor's (another fault on the same day); on a noisy index (a
    low winter sun, arrays of which the sensor feeds a share, the index divided by it) a
    step that the noise alone could have carried past it is no such contradiction.
    """
    toward = -np.sign(d) * fed  # the step in the direction the fault makes it
    lift = stats.norm.isf(CONFIRM_ALPHA) * se if np.isfinite(se) else 0.0
    return bool(0.5 * abs(d) <= toward <= 2 * abs(d) + lift)


def stuck_faults(w: Wide, sensor: pd.Series, reference: pd.Series,
                 min_stuck_minutes: float = 60.0) -> list[Suspect]:
    """Runs of an identical sensor value (see module docstring)."""
    v = sensor.to_numpy()
    same = np.zeros(len(v), dtype=bool)
    eq = np.abs(np.diff(v)) == 0
    same[1:] |= eq
    same[:-1] |= eq
    light = reference.to_numpy() > 50
    # a run counts where daylight would move the reading, or where the value is no night
    # offset (a few W/m^2 either side of zero are normal at night)
    telling = light | (np.abs(v) > 20)
    same &= telling
    step = w.interval_s.to_numpy()
    out = []
    # a run holds one value: two equal pairs side by side (95.7, 95.7, 93.1, 93.1) are none
    cuts = np.flatnonzero(np.r_[False, v[1:] != v[:-1]])
    pieces = []
    for a, b in runs(same):  # each run of pairs cut where the value changes inside it
        inner = cuts[np.searchsorted(cuts, a, "right"):np.searchsorted(cuts, b, "left")]
        edges = [a, *inner.tolist(), b]
        pieces += zip(edges[:-1], edges[1:], strict=True)
    for a, b in pieces:
        minutes = step[a:b].sum() / 60
        if minutes < min_stuck_minutes:
            continue
        out.append(Suspect(start=w.index[a], end=w.index[b - 1] + pd.Timedelta(
            seconds=float(step[b - 1])), mode="stuck", factor=float("nan"),
            evidence={"test": "identical consecutive readings", "value_wm2": float(v[a]),
                      "minutes": float(minutes)}))
    return out


def has_ghi(w: Wide) -> bool:
    """Whether a GHI sensor is logged (its transposition is evidence apart from the POA
    sensor)."""
    return bool(w.ghi.notna().sum() > 0.5 * (w.zenith < 80).sum())


def driven_columns(w: Wide) -> list[str]:
    """Inverters whose expected power follows the POA sensor: those it feeds, its reading
    itself or carried to their other planes (:func:`perfcheck.physics.poa_translated`), and,
    where no GHI is logged, every inverter (their plane irradiance is the sensor's, decomposed
    and transposed: GTI-DIRINT, see :mod:`perfcheck.model`)."""
    if not has_ghi(w):
        return list(w.inverters)
    share = _following(w)
    return [c for c in w.inverters if share.get(c, 0) > 0.5]


def _following(w: Wide) -> pd.Series:
    """Per inverter, the share of its daylight intervals (sun 10 deg up or more) whose expected
    power follows the POA sensor (:attr:`perfcheck.detect.common.Wide.follows_sensor`)."""
    return w.follows_sensor[(w.zenith < 80).to_numpy()].mean()


def power_faults(w: Wide, index: pd.Series, evidence: pd.Series, alpha: float = 1e-3,
                 min_shift: float = 0.02, min_days: int = 3) -> list[Suspect]:
    """Level faults of the sensor seen in the power of the inverters it drives.

    ``index`` is the daily log performance index of the sensor-driven inverters (their median;
    less the others' median where some inverters do not depend on the sensor), every day:
    a sensor reading a factor f off moves it by -log f on all of them together. It is
    segmented by circular binary segmentation (:func:`change_points`, false-alarm probability
    ``alpha`` per split). A segment is a candidate when its median differs from the median of
    as many days on either side (leaving out the other segments whose level is ``min_shift``
    or more off the series' median: a neighbouring fault is no reference) by at least
    ``min_shift`` with a Welch t-test p-value below ``alpha``, and each of its inner edges is
    a step carrying half the change or more (a sensor fault starts and ends when the sensor
    is swapped, cleaned or recalibrated; model error drifts with the season).

    ``evidence`` is the daily log ratio of the sensor to an independent reference on the days
    it holds (the clear-sky plane irradiance on clear days; the POA transposed from a logged
    GHI would do too, but a GHI station on another logger brings that logger's clock errors
    with it). A candidate is kept when that ratio moved the other way by half to twice the
    index's change (at least ``CONFIRM_MIN_DAYS`` days in the window and around it, around
    meaning as many days on either side, at least ``CONFIRM_SPAN_DAYS``), confirmed by a one-
    sided Welch t test at ``CONFIRM_ALPHA``, the reference stepping the same way at each edge
    too (the nearest clear days either side; a seasonal error has no steps): the power alone
    cannot tell a sensor from a plant-wide loss or the model's seasonal error, and the
    confirmation is a second, independent test on a candidate already significant at ``alpha``
    (the false-alarm probability of the pair is at most their product).
    """
    b = index.dropna()
    if len(b) < 4 * min_days:
        return []
    x = despike(b.to_numpy())
    xs = pd.Series(x, index=b.index)
    out = []
    segs = change_points(x, alpha=alpha, min_size=min_days)
    usual = float(np.median(x))
    windows = [(b.index[g.start], b.index[g.stop - 1] + pd.Timedelta(days=1)) for g in segs]
    off = [wd for g, wd in zip(segs, windows, strict=True)
           if abs(g.mean - usual) >= np.log1p(min_shift)]
    for g, (d0, d1) in zip(segs, windows, strict=True):
        ch = window_change(xs, d0, d1, min_days, skip=off)
        if ch is None:
            continue
        move, inside, around = ch
        t = stats.ttest_ind(inside, around, equal_var=False)
        if not (abs(move) >= np.log1p(min_shift) and t.pvalue < alpha):
            continue
        if not all(np.sign(st) == np.sign(move) and abs(st) >= 0.5 * abs(move)
                   for st in _edges(x, g.start, g.stop, min_days)):
            continue
        ind = window_change(evidence, d0, d1, CONFIRM_MIN_DAYS,
                             min_span_days=CONFIRM_SPAN_DAYS, skip=off)
        if ind is None or not (np.sign(ind[0]) == -np.sign(move)
                               and 0.5 * abs(move) <= abs(ind[0]) <= 2 * abs(move)):
            continue
        conf = stats.ttest_ind(ind[1], ind[2], equal_var=False,
                               alternative="less" if move > 0 else "greater")
        if not conf.pvalue < CONFIRM_ALPHA or not all(
                np.sign(st) == -np.sign(move) for st in _date_edges(evidence, d0, d1, min_days)):
            continue
        # the sensor's error per day: a straight line through the index inside the window
        # (a step is flat, a drift slopes), against the level around it
        days = ((xs.index[g.start:g.stop] - d0) / pd.Timedelta(days=1)).to_numpy(dtype=float)
        slope, icpt = stats.theilslopes(x[g.start:g.stop], days)[:2]
        level = float(np.median(inside) - move)
        every = pd.date_range(d0, d1 - pd.Timedelta(days=1), freq="D")
        fit = icpt + slope * ((every - d0) / pd.Timedelta(days=1)).to_numpy(dtype=float)
        daily = pd.Series(np.exp(level - fit), index=every)
        out.append(Suspect(
            start=pd.Timestamp(d0).tz_localize(w.tz).tz_convert("UTC"),
            end=pd.Timestamp(d1).tz_localize(w.tz).tz_convert("UTC"),
            mode="level", factor=float(np.exp(-move)), daily_factor=daily,
            evidence={"test": "Welch t on the driven inverters' daily index",
                      "p_value": float(t.pvalue), "t": float(t.statistic),
                      "days": int(len(inside)), "reference_days": int(len(around)),
                      "index_change_pct": 100 * float(np.expm1(move)),
                      "independent_reference_change_pct": 100 * float(np.expm1(ind[0])),
                      "independent_days": int(len(ind[1])),
                      "independent_p_value": float(conf.pvalue)}))
    return out


def sensor_series(w: Wide) -> pd.Series | None:
    """The POA sensor's reading as seen in the aligned rows (None without a sensor)."""
    cols = sensor_columns(w)
    if not cols:
        return None
    return w.poa[cols[0]].where(w.from_sensor[cols[0]])


def find(w: Wide, clear: pd.Series, planes_clear: pd.DataFrame, alpha: float = 1e-3,
         heat: pd.Series | None = None, reading: pd.Series | None = None,
         shares: pd.Series | None = None) -> list[Suspect]:
    """All suspect windows of the POA sensor (empty when no inverter depends on a sensor).

    ``planes_clear`` is the clear-sky irradiance [W/m^2] in each inverter's planes and, as
    ``_sensor``, in the sensor's plane (:func:`perfcheck.detect.common.clearsky_poa`). Where
    the sensor feeds no inverter directly (no GHI logged, arrays in other planes), the
    sensor-driven inverters' plane irradiance stands for the sensor. ``heat`` is the
    irradiance [W/m^2] that the logged module temperature implies
    (:func:`perfcheck.physics.poa_from_module_temperature`) on the rows of ``w``, if any: an
    every-day reference for :func:`reset_faults`. ``reading`` is the sensor's own reading
    [W/m^2] on the rows of ``w``, if logged: the stuck test runs on it where the sensor feeds
    no inverter's plane irradiance whole (arrays in several planes, the sensor in one of
    them), else on the sensor's reading as the inverters it feeds see it. ``shares`` gives
    per inverter the share of its DC rating in arrays that the sensor's reading feeds
    (:func:`perfcheck.model.in_sensor_plane`). Where GHI is logged and the sensor feeds no
    inverter whole, the inverters it feeds in part stand for the driven ones, each one's
    daily log index divided by its share (a sensor reading a factor f off moves an inverter
    fed in the share s by about s log f, to first order), and the sensor is its reading.
    The tests run in the order reset faults, power faults, clear-sky level faults, the last
    without the days of the faults found before it; of overlapping windows the first found
    is kept.
    """
    driven = driven_columns(w)
    part: dict[str, float] | None = None
    if not driven and reading is not None and reading.notna().any() and shares is not None:
        part = {c: float(v) for c, v in shares.items() if c in w.inverters and v > 0}
        driven = list(part)
    if not driven:
        return []
    scale = pd.Series(1.0, index=driven) if part is None else pd.Series(part)
    cols = sensor_columns(w)
    if cols:
        sensor, sensor_clear = sensor_series(w), planes_clear["_sensor"]
    elif part or w.translated.to_numpy().any():
        sensor, sensor_clear = reading, planes_clear["_sensor"]
    else:
        sensor, sensor_clear = w.poa[driven].mean(axis=1), planes_clear[driven].mean(axis=1)
    assert sensor is not None
    raw = sensor if cols else reading
    stuck = ([] if raw is None or raw.isna().all()
             else stuck_faults(w, raw, planes_clear["_sensor"]))
    # the level tests ignore the days touched by a stuck run
    touched = _days_of(w, stuck)
    free = sensor.where(~touched)
    # the module temperature is read on the array that carries the sensor, in its plane: it is
    # compared with the sensor's own reading where that is logged, not with the irradiance the
    # reading gives in other planes (decomposed and transposed, with the seasonal error of
    # those models)
    own = free if raw is None or raw.isna().all() else raw.where(~touched)
    # the others stand for what moves every inverter but the sensor's: an inverter whose
    # expected power follows the sensor in some intervals (its planes' irradiance carried
    # from the reading) but not most is neither driven nor one of them
    share = _following(w)
    others = [c for c in w.inverters if c not in driven and not share.get(c, 0) > 0]
    # a day an inverter produced nothing (an outage) has no log; it says nothing of the sensor
    valid = daylight(w)
    pi = np.log(daily_pi(w, valid).where(lambda p: p > 0))
    pi_fed = (pi[driven] / scale).median(axis=1)
    index = _against_others(pi_fed, pi, others)
    found = []
    if heat is not None:
        lit = _light_adjusted(pi, day_light(w, valid))
        steps = _against_others((lit[driven] / scale).median(axis=1), lit, others)
        found = reset_faults(w, _daily_log_ratio(w, own, heat.where(heat > 0)), index,
                             alpha=alpha, pi_steps=steps)

    def without(faults: list[Suspect]) -> tuple[pd.Series, pd.Series, pd.Series, pd.Series,
                                                 pd.Series]:
        """The sensor, the fed inverters' index, the index less the others', the sensor
        against the clear sky on every day and on clear days, without the days of
        ``faults``."""
        gone = touched | _days_of(w, faults)
        keep = ~pi.index.isin(pd.DatetimeIndex(np.unique(w.day.to_numpy()[gone])))
        rest = sensor.where(~gone)
        q = _daily_log_ratio(w, rest, sensor_clear)
        return (rest, pi_fed.where(keep), index.where(keep), q,
                q[clear.reindex(q.index).fillna(False).astype(bool)])

    # the power test leaves out a neighbouring fault's segment itself (power_faults)
    *_, q_clear = without([])
    found += power_faults(w, index, q_clear, alpha=alpha)
    # the clear-sky level test leaves out the days of the faults found above: compared with a
    # fault's days, those after its reset read as a fault of the other sign (at the end of
    # the record, with no other days beyond them, they passed every test)
    free, fed, rest_index, q, q_clear = without(found)
    if others or part:
        every_day = rest_index
    elif has_ghi(w) and cols:
        every_day = _daily_log_ratio(w, free, w.poa_modelled[cols[0]])
    else:
        every_day = q
    levels = level_faults(w, free, sensor_clear, clear, every_day, alpha=alpha)
    # cross-check: the inverters driven by the sensor move together against their expected
    # power (by about the sensor's change, the other way); a level change that the power does
    # not mirror is the reference's seasonal error, not the sensor
    kept: list[Suspect] = []
    for s in found + [s for s in levels if _mirrored(fed, q_clear, s, w.tz)]:
        if not any(s.start < f.end and f.start < s.end for f in kept):
            kept.append(s)
    found = sorted(kept, key=lambda s: s.start) + stuck
    ratio = (w.measured / w.expected).where(w.expected.gt(w.ac_w * 0.1, axis=1))
    out = []
    for s in found:
        inside = (w.index >= s.start) & (w.index < s.end)
        moves = {}
        for c in w.inverters:
            a, b = np.nanmedian(ratio[c][inside]), np.nanmedian(ratio[c][~inside])
            moves[c] = float(100 * (a / b - 1)) if np.isfinite(a) and b else None
        ev = {**s.evidence, "inverters_on_sensor": driven,
              "ratio_to_expected_change_pct": moves}
        if part:
            ev["sensor_share_of_plane_irradiance"] = part
        out.append(dataclasses.replace(s, evidence=ev, shares=part))
    return out


def _days_of(w: Wide, suspects: list[Suspect]) -> np.ndarray:
    """Per interval of ``w``: whether its site-local day is touched by one of ``suspects``."""
    inside = np.zeros(len(w.index), dtype=bool)
    for s in suspects:
        inside |= (w.index >= s.start) & (w.index < s.end)
    return w.day.isin(w.day[inside].unique()).to_numpy()


def _against_others(fed: pd.Series, pi: pd.DataFrame, others: list[str]) -> pd.Series:
    """The sensor-driven inverters' daily log index ``fed`` less the median of the other
    inverters' (``pi``), where there are any: a sensor fault moves the first ones' expected
    power only, a fault of the weather or of the whole plant moves both."""
    return fed - pi[others].median(axis=1) if others else fed


def _light_adjusted(pi: pd.DataFrame, light: pd.DataFrame) -> pd.DataFrame:
    """Each inverter's daily log index ``pi`` less what the day's light (:func:`day_light`)
    explains (:func:`perfcheck.detect.common.light_adjusted`, fitted on all its days but
    isolated outliers, :func:`despike`).

    A lone inverter's index moves with the day's light by several per cent per halving where
    the model does not follow the modules at low light. A sensor reading a factor f off moves
    the day's light by log f as well, which the fit takes back at its slope only (about 0.05
    to 0.07 on the suite's plants), a fifteenth or less of the fault's mirror in the index.
    """
    out = pi.copy()
    for c in pi.columns:
        v = pi[c].dropna()
        if len(v) < 3:
            continue
        x = v.to_numpy()
        out.loc[v.index, c] = light_adjusted(x, light[c].reindex(v.index).to_numpy(),
                                             despike(x) == x)[0]
    return out


def _mirrored(pi_fed: pd.Series, q: pd.Series, s: Suspect, tz: Any) -> bool:
    """The sensor-fed inverters' daily index moves against the sensor's change in the window,
    by at least half of it and at most twice, both compared with as many days on either side.

    The sensor's change is that of its daily log ratio to the clear sky on clear days ``q``
    over the same days (the segment's factor against the long reference where fewer than
    three clear days lie inside or around): a drift has already moved the sensor on the days
    before the window, and the index is measured against those days too."""
    d0 = s.start.tz_convert(tz).tz_localize(None).normalize()
    d1 = s.end.tz_convert(tz).tz_localize(None).normalize()
    span = d1 - d0

    def inside_around(x: pd.Series) -> tuple[pd.Series, pd.Series]:
        x = x.dropna()
        return x[(x.index >= d0) & (x.index < d1)], x[
            ((x.index >= d0 - span) & (x.index < d0)) | ((x.index >= d1) & (x.index < d1 + span))]

    inside, around = inside_around(pi_fed)
    if len(inside) < 3 or len(around) < 3:
        return False
    move = float(inside.median() - around.median())
    q_in, q_around = inside_around(q)
    want = (-float(q_in.median() - q_around.median()) if min(len(q_in), len(q_around)) >= 3
            else -float(np.log(s.factor)))
    s.evidence["fed_inverters_index_change_pct"] = 100 * (np.exp(move) - 1)
    return bool(np.sign(move) == np.sign(want) and 0.5 * abs(want) <= abs(move) <= 2 * abs(want))


def _scaled(w: Wide, s: Suspect) -> bool:
    """Whether a suspect window is corrected by dividing by the sensor's error (see
    :func:`corrected`) rather than rebuilt from the POA transposed from GHI."""
    return s.daily_factor is not None or not has_ghi(w)


def corrected(w: Wide, suspects: list[Suspect]) -> Wide:
    """The series with the expected power of the sensor-driven inverters rebuilt inside the
    suspect windows.

    Where the sensor's error per day was estimated (from the power, or fitted at a reset),
    or no GHI is logged (the modelled POA then comes from the same sensor), the expected
    power, the potential and the irradiance are divided by that error (per day where
    estimated, else the window's factor; the power is close to proportional to the
    irradiance, so this is first order): the sensor's calibration around the window stays
    the reference, where the POA decomposed and transposed from GHI would bring its own
    error, which varies with the season and the sky by several % (common knowledge of those
    models, no source checked). Otherwise (a stuck sensor, a level found on clear days only)
    from the model stage's series built on the POA transposed from GHI (its own cell
    temperature, part-load efficiency and limits), and their irradiance from that modelled
    POA. An inverter that the sensor feeds in part (:attr:`Suspect.shares`) takes the error
    in its share, or the modelled series on all its rows; where GHI is logged, a driven
    inverter's rows whose irradiance was transposed from GHI (not the sensor's reading, nor
    carried from it) keep their series."""
    if not suspects:
        return w
    exp, pot, poa = w.expected.copy(), w.potential.copy(), w.poa.copy()
    for s in suspects:
        fed = s.shares or dict.fromkeys(driven_columns(w), 1.0)
        driven = list(fed)
        inside = (w.index >= s.start) & (w.index < s.end)
        if _scaled(w, s):
            if s.daily_factor is not None:
                f = s.daily_factor.reindex(w.day.to_numpy()).to_numpy()
            else:
                f = np.full(len(w.index), s.factor)
            use = inside & np.isfinite(f)
            # an inverter fed by the sensor in the share k sees 1 + k (f - 1) of the error
            k = np.array([fed[c] for c in driven])[None, :]
            if s.shares is None and has_ghi(w):  # rows transposed from GHI do not follow it
                k = k * w.follows_sensor[driven].to_numpy()[use]
            div = 1 + k * (f[use, None] - 1)
            for frame in (exp, pot, poa):
                frame.loc[use, driven] = frame.loc[use, driven].to_numpy() / div
            continue
        for c in w.inverters:
            # an inverter fed in part: its series from the modelled POA alone, all its rows
            use = inside & (w.follows_sensor[c].to_numpy()
                            | (fed.get(c, 0.0) > 0))
            if not use.any():
                continue
            pot.loc[use, c] = w.potential_modelled[c].to_numpy()[use]
            exp.loc[use, c] = w.expected_modelled[c].to_numpy()[use]
            poa.loc[use, c] = w.poa_modelled[c].to_numpy()[use]
    return dataclasses.replace(w, expected=exp, potential=pot, poa=poa)


def events(w_before: Wide, w_after: Wide, suspects: list[Suspect]) -> list[Event]:
    """One ``sensor_fault`` event per window; no energy is lost (the expected was wrong)."""
    out = []
    step = w_before.interval_s.to_numpy()
    for s in suspects:
        inside = (w_before.index >= s.start) & (w_before.index < s.end)
        d = (w_before.expected - w_after.expected).to_numpy()[inside]
        corr = float(np.nansum(d * step[inside, None]) / 3.6e6)
        note = (f"sensor read {100 * (s.factor - 1):.1f} % off the reference"
                if s.mode == "level" else "sensor stuck at one value")
        if s.evidence.get("shape") == "drift":
            note = (f"sensor drifted to {100 * (s.factor - 1):.1f} % off the reference by its "
                    f"reset, past {s.evidence['detectable_pct']:.0f} % from "
                    f"{s.evidence['detectable_from']}; its onset is uncertain by about "
                    f"{s.evidence['onset_se_days']:.0f} days (one standard error)")
        out.append(Event(kind="sensor_fault", scope="plant", start=s.start, end=s.end,
                         energy_loss_kwh=0.0, energy_loss_kwh_low=0.0, energy_loss_kwh_high=0.0,
                         method=METHOD, evidence=s.evidence,
                         detail={"mode": s.mode, "note": note,
                                 "fallback": ("expected power of the sensor-fed inverters "
                                              "divided by the sensor's error in this window"
                                              if _scaled(w_before, s) else
                                              "expected power of the sensor-fed inverters "
                                              "rebuilt from modelled POA in this window"),
                                 "expected_correction_kwh": -corr}))
    return out
