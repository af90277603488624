"""Partial outages (string faults): a step down in an inverter's output relative to its
expected power and to its sibling inverters.

For each inverter the daily value is the median, over the day's usable intervals, of
(measured/expected of this inverter) / (median of the same ratio over its siblings); with one
inverter, its own measured/expected. The median over the day keeps the value robust to shading
that touches only part of the day; dividing by the siblings removes what all arrays share
(weather-model error, soiling, degradation). A sibling's own lost strings move that median too
(of two siblings it is their mean): the other inverters then rise against it by up to the
sibling's share, and that rise, the highest long level, would become their reference and
everything else a loss. So the inverters are searched in turn: the faults of the one whose
own ratio to expected shows its fault the most (the test that tells which inverter changed;
then by the test against its siblings) are kept, their shares put back in its power where it
serves as a sibling, and the others searched again, until
none shows a fault (one outlier taken out before the next is looked for). Changes of the
mean of the log daily value are located by binary segmentation with a significance test at
each split
(:func:`perfcheck.detect.common.change_points`), and neighbouring segments below the reference
level that differ by less than half a string's share, or by less than a whole string's that
their own days cannot tell apart (Welch), are joined (:func:`merge_within`: no string changed
between them); a segment whose level is below the reference level (the highest
of the long segments: at least twice ``min_days`` and a fifth of the longest) by a Student
t-test p-value below ``alpha`` and by at least half a string's share of the DC power, and below
the days next to it (those the share is measured against, below) by a Student t-test p-value
below ``alpha`` with their own noise (a winter's days are noisier than the summer's that the
long reference holds), is a partial outage, when two physical checks hold: every edge of the
segment inside the data is a step (the median of the ``min_days`` days on either side differs
by at least half the segment's shift: a lost string is a step, a seasonal drift or a growing
shade is not), and the loss is the same share in the morning and in the afternoon (half-day
values within a factor two: a lost string takes its share all day, a shade takes it on one
side of the day only). Its edges are then placed to the interval (:func:`_edges`); a fault that
touches fewer than ``min_days`` days so is dropped (the intervals and the days' medians disagree
on when the strings were lost). The share lost is measured on the fault's whole days against the
days next to it (the mean of the level before and the level after, within two weeks: the
inverter's level against its siblings wanders with the season, so the long reference segment
that proves the fault would bias its size); times the number of strings in the site file it
gives the number of strings lost, which must be whole within the share's error (floored at the
model's error over weeks, :data:`perfcheck.detect.common.MODEL_FLOOR`) at two-sided ``alpha``: a
run of dim, diffuse days on which the model errs for one plane (low-light efficiency, the sky's
brightness by tilt and azimuth, which the siblings do not share) takes some share, not a
string's.

The daily values are taken less what the day's light explains on the healthy days
(:func:`perfcheck.detect.common.light_adjusted`), and segmented again: without siblings, a run
of dull days on which the model errs at low light would otherwise read as a lost string, or
set a lost string's edges.

The share's band carries, beside the days' error (autocorrelated), the model's error over
weeks (:data:`perfcheck.detect.common.MODEL_FLOOR`) and the distance between the share and
the whole strings' share (rectangular).

The false-alarm rate per inverter and series is bounded by about ``alpha`` per split tested
(Bonferroni), default 1e-3.

References
----------
Scott & Knott 1974 (binary segmentation); Student 1908 (Biometrika 6:1), the two-sample t
test with the variance pooled; Welch 1947 (Biometrika 34:28) (all from memory).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pandas as pd

from perfcheck.detect.common import (
    MODEL_FLOOR,
    Event,
    Footprint,
    Segment,
    Wide,
    ar1_mean_factor,
    change_points,
    coarsen,
    day_light,
    despike,
    light_adjusted,
    long_run_sigma,
    row_median,
    scope_of,
    shares_put_back,
)
from perfcheck.lazy import lazy_module

stats = lazy_module("scipy.stats")

METHOD = ("binary segmentation of the daily median ratio to expected and to sibling inverters, "
          "less what the day's light explains on the healthy days (least squares), "
          "Bonferroni-bounded t test per split and Student t test against the reference level "
          "(Scott & Knott 1974; Student 1908)")


def daily_relative(w: Wide, usable: pd.DataFrame, siblings: bool = True,
                   min_intervals: int = 3, ref: Wide | None = None) -> pd.DataFrame:
    """Daily median of each inverter's ratio to expected, divided by its siblings' median
    (``siblings=False``: the inverter's own ratio to expected).

    ``usable`` marks the intervals to use (daylight, unclipped, not already explained);
    ``ref`` (default ``w``) the series the siblings' ratios are read from.
    """
    r = _ratio(w, usable)
    if siblings and len(w.inverters) > 1:
        sib = r if ref is None else _ratio(ref, usable)
        rel = pd.DataFrame(index=r.index, columns=r.columns, dtype=float)
        for inv in r.columns:
            rel[inv] = r[inv] / row_median(sib.drop(columns=inv).to_numpy(dtype=float))
    else:
        rel = r
    days = w.day.to_numpy()
    n = rel.notna().groupby(days).sum()
    med = rel.groupby(days).median()
    return med.where(n >= min_intervals)


def detect(w: Wide, usable: pd.DataFrame, strings: dict[str, int], alpha: float = 1e-3,
           min_days: int = 3, judged: pd.DataFrame | None = None
           ) -> tuple[list[Event], list[Footprint]]:
    """Partial-outage events with their footprints (share of expected power lost, with its
    relative standard error), the inverters searched in turn (see the module: each
    inverter's faults found against siblings whose faults found before are put back).

    ``judged`` (default ``usable``): the intervals the edges of a fault are placed on, the
    clipped ones among them (:func:`_edges`).

    The daily statistics are taken on 15-minute blocks (:func:`coarsen`), the energy on
    the series as given. The share's standard error takes the days' autocorrelation
    (:func:`_mean_var`, phi read on the long reference segment) and the level's drift
    between the days before and after (rectangular over their range); the band here is the
    share's alone: the ledger counts the share against the inverter's local level and
    widens the band by that level's error (:mod:`perfcheck.detect.attribution`).
    """
    wc, uc = coarsen(w, usable)
    own = np.log(daily_relative(wc, uc, siblings=False))
    morning = (wc.azimuth < 180).to_numpy()[:, None]
    # the day's light: the log of the mean plane irradiance of its usable blocks
    light = day_light(wc, uc)
    found: dict[str, tuple[list[Event], list[Footprint]]] = {}
    put_back: list[Footprint] = []  # the faults found so far, for the siblings' ratio
    while len(found) < len(w.inverters):
        ref = dataclasses.replace(w, measured=shares_put_back(w, put_back)) if put_back else w
        ref_c = coarsen(ref)[0] if put_back else wc
        daily = daily_relative(wc, uc, ref=ref_c)
        halves = [np.log(daily_relative(wc, uc & morning, min_intervals=2, ref=ref_c)),
                  np.log(daily_relative(wc, uc & ~morning, min_intervals=2, ref=ref_c))]
        new = {inv: _faults(inv, w, usable if judged is None else judged, ref, daily, own,
                            halves, light, strings, alpha, min_days)
               for inv in w.inverters if inv not in found}
        new = {inv: f for inv, f in new.items() if f[0]}
        if not new:
            break
        # the inverter whose own ratio to expected shows its fault the most (the test that
        # tells which inverter changed), the fault's test against its siblings next
        first = min(new, key=lambda inv: min((e.evidence["own_ratio_p_value"],
                                              e.evidence["p_value"]) for e in new[inv][0]))
        found[first] = new[first]
        put_back += new[first][1]
    events = [e for inv in w.inverters if inv in found for e in found[inv][0]]
    prints = [p for inv in w.inverters if inv in found for p in found[inv][1]]
    return events, prints


def _ratio(w: Wide, usable: pd.DataFrame) -> pd.DataFrame:
    """Each inverter's measured over expected power on the ``usable`` intervals."""
    return (w.measured / w.expected).where(usable)


def _faults(inv: str, w: Wide, judged: pd.DataFrame, ref_w: Wide, daily: pd.DataFrame,
            own: pd.DataFrame, halves: list[pd.DataFrame], light: pd.DataFrame,
            strings: dict[str, int], alpha: float, min_days: int
            ) -> tuple[list[Event], list[Footprint]]:
    """The lost strings of inverter ``inv`` (:func:`detect`), from its daily value
    ``daily`` against its siblings' (in ``ref_w``), its own ratio ``own``, the half-days'
    ``halves`` (logs) and the days' ``light``."""
    events: list[Event] = []
    prints: list[Footprint] = []
    s = np.log(daily[inv].where(daily[inv] > 0)).dropna()
    if len(s) < 4 * min_days:
        return events, prints
    x = despike(s.to_numpy())
    segs = change_points(x, alpha=alpha, min_size=min_days)
    if len(segs) < 2:
        return events, prints
    # what the day's light does to the ratio on the healthy days removed, and the days
    # segmented again
    ref = _reference(segs, min_days)
    x, slope_var, lit = light_adjusted(x, light[inv].reindex(s.index).to_numpy(),
                                       slice(ref.start, ref.stop))
    segs = change_points(x, alpha=alpha, min_size=min_days)
    if len(segs) < 2:
        return events, prints
    ref = _reference(segs, min_days)
    xr = x[ref.start:ref.stop]
    own_r = own[inv].reindex(s.index[ref.start:ref.stop]).dropna().to_numpy()
    n_str = max(1, strings.get(inv, 1))
    merged = merge_within(x, segs, ref, 0.5 / n_str, alpha)
    # the days' autocorrelation, read on the long reference segment (a few days next to
    # a fault are too few to estimate it)
    _, phi = long_run_sigma(xr)
    for g in merged:
        if g is ref or g.mean >= ref.mean:
            continue
        xs = x[g.start:g.stop]
        # the days' noise pooled over the fault and the reference, as the segmentation
        # takes it: a lost string scales the power, and the log of a scaled power keeps
        # its noise; Welch's test would estimate the fault's variance from its own days
        # alone, about n - 1 degrees of freedom, and cannot reach alpha on a fault seen
        # on three days (a winter at a high latitude, few intervals the model expects)
        t = stats.ttest_ind(xs, xr, equal_var=True)
        share = 1 - math.exp(g.mean - ref.mean)
        if not (t.pvalue < alpha and share >= 0.5 / n_str):
            continue
        # the inverter's own ratio to expected must drop too (with two inverters the
        # sibling ratio alone cannot tell which one changed)
        own_s = own[inv].reindex(s.index[g.start:g.stop]).dropna().to_numpy()
        t_own = stats.ttest_ind(own_s, own_r, equal_var=False, alternative="less")
        if not t_own.pvalue < 0.05:
            continue
        steps = _edge_steps(x, g.start, g.stop, min_days)
        if any(st < 0.5 * share for st in steps):
            continue
        half = [_share(h[inv], s.index[g.start:g.stop], s.index[ref.start:ref.stop])
                for h in halves]
        if not (min(half) >= 0.5 * max(half) and min(half) > 0):
            continue
        # the share lost is measured against the days next to the fault: the inverter's
        # level against its siblings wanders with the season, so a far reference biases
        # it; the level before and the level after are averaged (a linear drift
        # interpolated to the fault), each mean's variance autocorrelation-aware, and
        # the level during the fault taken as anywhere between the two (rectangular,
        # variance range^2 / 12: JCGM 100:2008, 4.3.7)
        near = [m for m in _near(s.index, g, merged, ref, 0.5 / n_str)
                if m.sum() >= min_days] or [np.arange(ref.start, ref.stop)]
        sides = [x[m] for m in near]
        # the same test against the days next to the fault, with their noise: the days'
        # spread changes with the season (a winter's days, low sun and few intervals, are
        # noisier than the summer's that the long reference holds), so the long
        # reference's variance can make a run of poor winter days look certain
        t_near = stats.ttest_ind(xs, np.concatenate(sides), equal_var=True)
        if not t_near.pvalue < alpha:
            continue
        base = float(np.mean([np.mean(v) for v in sides]))
        d0, d1 = s.index[g.start], s.index[g.stop - 1]
        lo, hi = _edges(w, judged, inv, d0, d1, math.exp(base), math.exp(g.mean), min_days,
                        ref_w)
        # placed to the interval, the fault must still touch the days the segmentation
        # needs to tell a level (min_days): where the intervals put its edges so that fewer
        # remain, they and the days' medians disagree on when the strings were lost, and
        # what is left lies below the method's resolution
        if (w.day.iloc[hi - 1] - w.day.iloc[lo]).days + 1 < min_days:
            continue
        # the days the strings were lost all day: a day holding an edge is partly healthy
        whole = (s.index[g.start:g.stop] > w.day.iloc[lo]) & (
            s.index[g.start:g.stop] < w.day.iloc[hi - 1])
        fault = np.arange(g.start, g.stop)
        if whole.sum() >= min_days:
            xs, fault = xs[whole], fault[whole]
        share = 1 - math.exp(float(np.mean(xs)) - base)
        between = (np.mean(sides[-1]) - np.mean(sides[0])) ** 2 / 12
        # the light slope's error, carried by the difference of light between the fault's
        # days and those next to it
        dlight = np.nanmean(lit[fault]) - np.mean([np.nanmean(lit[m]) for m in near])
        se = math.sqrt(_mean_var(xs, phi) + sum(_mean_var(v, phi) for v in sides)
                       / len(sides) ** 2 + between
                       + (slope_var * dlight ** 2 if np.isfinite(dlight) else 0.0))
        # a lost string takes a whole string's share: the share must lie within its
        # error of a whole number of the site file's strings (taken as alike, as for the
        # number reported), the error floored at the model's over weeks (MODEL_FLOOR);
        # two-sided alpha (a run of dim days on which the model errs for one plane takes
        # whatever share that error is)
        k = min(max(round(share * n_str), 1), n_str)
        if abs(share - k / n_str) > stats.norm.isf(alpha / 2) * math.hypot(
                se, MODEL_FLOOR) * (1 - share):
            continue
        # the share's error for its band: the days' (above), the model's over weeks
        # (MODEL_FLOOR: no model tracks a plane's ratio better over the weeks between
        # the fault and the days next to it), and the whole strings' share as a value the
        # share may take (rectangular of half-width the distance to it, JCGM 100:2008,
        # 4.3.7): the strings are taken as alike, which the site file does not promise
        to_whole = math.log((1 - k / n_str) / (1 - share)) if k < n_str else 0.0
        se = math.sqrt(se ** 2 + MODEL_FLOOR ** 2 + to_whole ** 2 / 3)
        share_lo = 1 - math.exp(float(np.mean(xs)) - base + 1.96 * se)
        share_hi = 1 - math.exp(float(np.mean(xs)) - base - 1.96 * se)
        exp = w.expected[inv].to_numpy()[lo:hi]
        step = w.interval_s.to_numpy()[lo:hi]
        energy = float(np.nansum(exp * share * step) / 3.6e6)
        ev = Event(
            kind="partial_outage", scope=scope_of(inv),
            start=w.index[lo],
            end=w.index[hi - 1] + pd.Timedelta(seconds=float(w.interval_s.iloc[hi - 1])),
            energy_loss_kwh=energy,
            energy_loss_kwh_low=max(0.0, energy * share_lo / share),
            energy_loss_kwh_high=energy * share_hi / share,
            method=METHOD,
            evidence={"test": "Student t, pooled variance", "p_value": float(t.pvalue),
                      "t": float(t.statistic), "days": int(len(xs)),
                      "reference_days": int(len(xr)),
                      "share_reference_days": int(sum(len(v) for v in sides)),
                      "share_of_dc_lost": share, "share_ci95": [share_lo, share_hi],
                      "own_ratio_p_value": float(t_own.pvalue),
                      "near_days_p_value": float(t_near.pvalue),
                      "edge_steps_share": steps, "morning_afternoon_share": half,
                      "segments": len(segs)},
            detail={"strings_lost": int(k), "strings_total": n_str,
                    "share_of_dc_lost": share},
        )
        events.append(ev)
        prints.append(Footprint(ev, lo, hi, [inv], factor=np.full((hi - lo, 1), share),
                                factor_rel_sigma=(1 - share) * se / share))
    return events, prints


def _reference(segs: list[Segment], min_days: int) -> Segment:
    """The reference level: the highest of the long segments (at least twice ``min_days``
    and a fifth of the longest)."""
    longest = max(g.stop - g.start for g in segs)
    return max((g for g in segs if g.stop - g.start >= max(2 * min_days, 0.2 * longest)),
               key=lambda g: g.mean)


def _near(days: pd.Index, g: Segment, merged: list[Segment], ref: Segment, step: float,
          half_days: int = 14) -> tuple[np.ndarray, np.ndarray]:
    """Masks of the days within ``half_days`` before and after segment ``g`` that lie in no
    segment below ``ref`` by ``step`` or more (another string fault, or ``g`` itself): the
    local reference of the share lost, as :func:`perfcheck.detect.common.local_level` takes
    the inverter's level."""
    d = pd.DatetimeIndex(days)
    a, b = d[g.start], d[g.stop - 1]
    span = pd.Timedelta(days=half_days)
    other = np.zeros(len(d), dtype=bool)
    for h in merged:
        if 1 - math.exp(h.mean - ref.mean) >= step:
            other[h.start:h.stop] = True
    return (d >= a - span) & (d < a) & ~other, (d > b) & (d <= b + span) & ~other


def _mean_var(x: np.ndarray, phi: float) -> float:
    """Variance of the mean of the consecutive daily values ``x`` with lag-1
    autocorrelation ``phi``: their variance times the AR(1) factor over their number
    (:func:`perfcheck.detect.common.ar1_mean_factor`)."""
    return float(np.var(x, ddof=1)) * ar1_mean_factor(len(x), phi) / len(x)


def merge_within(x: np.ndarray, segs: list[Segment], ref: Segment, step: float,
                 alpha: float | None = None) -> list[Segment]:
    """Neighbouring segments below ``ref`` whose levels differ by less than ``step`` (a share
    of the power; half a string's), or (with ``alpha``) by less than ``2 step`` (a whole
    string's) and not significantly at ``alpha`` by Welch's t test on their own days, joined
    into one, its mean over the joined values.

    The segmentation's t test takes days as independent, so a slow drift of the ratio inside
    one fault (a shade that grows or wanes over the weeks of a lost string) splits it at
    shifts far smaller than a string; the pieces' inner edges are then no steps and each
    would fail the edge check. A change smaller than half a string's share is no change of
    the number of strings lost, so the pieces are one fault (``ref`` itself is never joined).
    The segmentation also pools the days' noise over the series, while days with few usable
    intervals (low winter sun) are far noisier than the rest: a run of them inside a fault is
    cut off as a level of its own, off by up to a string's share. Between two segments that
    each lie half a string or more below ``ref`` (both lost strings), a difference under a
    whole string's share that their own days cannot tell, each with its own variance (Welch
    1947), is no change of the strings lost either; a level within half a string of ``ref``
    (no string lost) is never joined to a fault so, and a whole string's or more stays a
    change however few its days (Welch's test leaves a fault seen on three days about two
    degrees of freedom, and could never keep it apart at ``alpha``).
    """
    out: list[Segment] = []
    for g in segs:
        prev = out[-1] if out else None
        if (prev is not None and prev is not ref and g is not ref and prev.mean < ref.mean
                and g.mean < ref.mean and _same_strings(x, prev, g, ref, step, alpha)):
            out[-1] = Segment(prev.start, g.stop, float(np.mean(x[prev.start:g.stop])))
        else:
            out.append(g)
    return out


def _same_strings(x: np.ndarray, a: Segment, b: Segment, ref: Segment, step: float,
                  alpha: float | None) -> bool:
    """Whether the neighbouring segments ``a`` and ``b`` hold the same strings lost, as
    :func:`merge_within` judges it."""
    shift = abs(1 - math.exp(b.mean - a.mean))
    if shift < step:
        return True
    lost = min(1 - math.exp(g.mean - ref.mean) for g in (a, b))
    return alpha is not None and shift < 2 * step and lost >= step and not stats.ttest_ind(
        x[a.start:a.stop], x[b.start:b.stop], equal_var=False).pvalue < alpha


def _edges(w: Wide, usable: pd.DataFrame, inv: str, d0: pd.Timestamp, d1: pd.Timestamp,
           level_ok: float, level_low: float, min_days: int = 3, ref: Wide | None = None
           ) -> tuple[int, int]:
    """Rows [lo, hi) of the lost strings, to the interval: the step from ``level_ok`` to
    ``level_low`` of the interval ratio (to siblings, as the daily value) at the split with
    the least squared distance to the two known levels (a lost string is a step;
    least-squares change-point with known levels, Hinkley 1970, Biometrika 57:1, from
    memory), searched about the first and the last day of the fault ``d0`` and ``d1``.

    A lost string lowers both halves of the day alike; a fault on the same days that the
    detectors before left in the series (a stalled row's rest, a shade) one side of it,
    and only lowers. So a half-day whose median ratio lies nearer the upper level shows the
    strings still there, and the days' medians the fault's days were found by may be off
    by the ``min_days`` the segmentation needs: the start is searched in the last such
    half-day from the day before ``d0`` to ``min_days`` - 1 days after it and the half-day
    that follows, the stop in the first from ``min_days`` - 1 days before ``d1`` to the day
    after and the half-day before it (without one, from the day before ``d0`` through
    ``d0``, and from ``d1`` through the day after). The siblings' ratios are read from
    ``ref`` (default ``w``). ``usable`` should hold the intervals the
    model expects at the rating too: where the inverter still reaches it the lost strings
    cost nothing and the ratio stays at the upper level, where it falls short the step
    shows; without them an edge inside a clear noon falls anywhere in it. Without usable
    intervals there, the days' edges."""
    days = w.day.to_numpy()
    r = (w.measured[inv] / w.expected[inv]).where(usable[inv])
    if len(w.inverters) > 1:
        r = r / row_median(_ratio(w if ref is None else ref, usable).drop(columns=inv)
                           .to_numpy(dtype=float))
    r = r.to_numpy()
    one = pd.Timedelta(days=1)
    # half-days: a number per row that grows with time (two per day)
    half = 2 * (days - days.min()).astype("timedelta64[D]").astype(np.int64) + (
        w.azimuth >= 180).to_numpy()

    def split(rows: np.ndarray, first: float, then: float) -> int | None:
        ok = rows[np.isfinite(r[rows])]
        if len(ok) < 2:
            return None
        cost = (r[ok] - first) ** 2 - (r[ok] - then) ** 2  # > 0 where 'then' fits better
        total = np.r_[0.0, np.cumsum(cost)]  # split k: the first k are 'first'
        k = int(np.argmax(total[-1] - total))  # maximises the fit of the 'then' tail
        return int(ok[k]) if k < len(ok) else None

    def healthy(a: pd.Timestamp, b: pd.Timestamp) -> np.ndarray:
        """The half-days between days a and b whose median ratio lies nearer the upper
        level (in log)."""
        on = (days >= a) & (days <= b) & np.isfinite(r)
        med = pd.Series(r[on]).groupby(half[on]).median()
        nearer = (np.log(med) - math.log(level_ok * level_low) / 2) * (level_ok - level_low)
        return med.index[(nearer > 0).to_numpy()].to_numpy()

    seen = half[np.isfinite(r)]

    def with_next(h: int, step: int) -> np.ndarray:
        """Rows of half-day ``h`` and of the next one with readings (``step`` 1) or the
        one before (-1)."""
        other = seen[seen > h] if step > 0 else seen[seen < h]
        h2 = h if not len(other) else (other.min() if step > 0 else other.max())
        return np.flatnonzero((half >= min(h, h2)) & (half <= max(h, h2)))

    rows = np.flatnonzero((days >= d0) & (days <= d1))
    lo, hi = int(rows[0]), int(rows[-1]) + 1
    ups = healthy(d0 - one, d0 + (min_days - 1) * one)
    start = split(with_next(int(ups.max()), 1) if len(ups)
                  else np.flatnonzero((days >= d0 - one) & (days <= d0)), level_ok, level_low)
    ups = healthy(d1 - (min_days - 1) * one, d1 + one)
    stop = split(with_next(int(ups.min()), -1) if len(ups)
                 else np.flatnonzero((days >= d1) & (days <= d1 + one)), level_low, level_ok)
    if start is not None and start < hi:
        lo = start
    if stop is not None and stop > lo:
        hi = stop
    return lo, hi


def _edge_steps(x: np.ndarray, start: int, stop: int, k: int) -> list[float]:
    """Share lost across each inner edge of x[start:stop] (median of k values each side)."""
    out = []
    if start > 0:
        out.append(1 - math.exp(np.median(x[start:start + k]) - np.median(x[max(0, start - k):
                                                                           start])))
    if stop < len(x):
        out.append(1 - math.exp(np.median(x[max(start, stop - k):stop]) - np.median(
            x[stop:stop + k])))
    return out


def _share(h: pd.Series, seg_days: pd.Index, ref_days: pd.Index) -> float:
    a = h.reindex(seg_days).dropna()
    b = h.reindex(ref_days).dropna()
    if len(a) < 2 or len(b) < 2:
        return float("nan")
    return 1 - math.exp(float(a.mean() - b.mean()))
