"""Clock faults: the logger's time labels off by a constant offset for a while.

Every day with readings in at least 90 % of its daylight intervals, the centre (power-weighted
mean time) of an inverter's measured power is compared with the centre of a reference. Where
an irradiance sensor on another logger (another clock) feeds an expected power of the
inverter (:func:`independent`), the reference is that expected power: clouds move it as they
move the power, so the two centres differ by the model's small bias alone, and a season's
weather (foggy mornings, afternoon storms) moves both alike. Otherwise it is the inverter's
clear-sky plane-of-array irradiance computed from the sun position
(:func:`perfcheck.detect.common.clearsky_poa`, summed over the inverter's arrays by DC rating).
For a south-facing array this is the solar noon; for other orientations it is the same
astronomy seen from their plane. Clouds move a day's centre against it by a few to some
tens of minutes either way, a clock error moves every day of its window alike; clear days
alone are too few (and a shifted logger's own irradiance makes its days look cloudy against
the clear-sky curve, so a missed daylight-saving change hides from a clear-day test). The
difference [min] per day, isolated outliers removed (:func:`perfcheck.detect.common.despike`),
is segmented by circular binary segmentation (:func:`perfcheck.detect.common.change_points`;
against the clear sky the daily midpoints of the span of production are segmented too, and
their windows tested on the centre as the centre's own are: :func:`_span_windows`); a window
whose level differs from the reference level (the longest segment) by at least
``min_offset_min`` (20 min)
with a Welch t-test p-value below ``alpha`` (one-sided where it begins at a daylight-saving
change in that change's direction: :func:`_p_value`) is a clock fault of that size; its edges
are then placed on the day by the midpoint of each day's span of production (:func:`midspans`:
clouds shorten the span at both ends alike, so it moves by a few minutes where the centre moves
by tens, while a clock moves it by the whole offset). That midpoint must move with the centre
over the window (:func:`_span_change`): a loss on one side of the day, such as a tracker
stalled facing east or west, moves the centre by as much as an hour but leaves the production
starting and ending with the sun. Inverters whose windows agree form one event, reported
only when it covers every inverter of a logger (a clock belongs to a logger);
plant scope when it covers all inverters. A window that begins at a daylight-saving change of
the site's zone with that change's step inside the estimate's interval is set to the change
exactly (:func:`daylight_saving`).

:func:`corrected` shifts the readings of the window back by the offset (rounded to the
interval). A logger's clock labels every channel it records, so the correction follows the
site file's loggers (:class:`Loggers`): the measured power of the logger's inverters and the
site weather it records, from which the model is run again over the window (:func:`rerun`:
an array transposed from a shifted POA sensor takes the sun's position at the reading's true
time, which shifting its expected power would not give).

References
----------
Ineichen & Perez 2002 clear sky, Hay & Davies 1980 transposition; Olshen et al. 2004
(segmentation); Welch 1947 (t test); the daylight-saving changes are the IANA time zone
database's for the site's zone. The power-centre and span-midpoint tests are our own
formulation.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from functools import partial
from typing import Any

import numpy as np
import pandas as pd

from perfcheck import model
from perfcheck.detect.common import (
    Event,
    Segment,
    Wide,
    despike,
    segmented,
    window_change,
)
from perfcheck.detect.sensor import CONFIRM_ALPHA, driven_columns, has_ghi, refine_edge
from perfcheck.lazy import lazy_module
from perfcheck.site import DEVICE_QUANTITIES, QUANTITIES, Site

stats = lazy_module("scipy.stats")

# a window's edges are searched again within this many days, and a daylight-saving change
# this near its start is its start (a cloudy day next to an edge moves it by a day or two:
# common practice)
EDGE_DAYS = 2
METHOD = ("daily power centre against that of the expected power from another logger's "
          "irradiance sensor where there is one, else of the clear-sky plane irradiance from "
          "the sun position; segmentation and Welch t test; the span of production moving "
          "with it")


@dataclasses.dataclass(frozen=True)
class Shift:
    start: pd.Timestamp
    end: pd.Timestamp
    offset_min: float  # positive: labels late
    inverters: tuple[str, ...]
    evidence: dict[str, Any]
    logger: str = ""  # the logger whose clock was off ("": not known)


@dataclasses.dataclass(frozen=True)
class Loggers:
    """What each logger records, from the site file: a clock belongs to a logger and labels
    every channel on it. ``inverters``: logger name -> the inverters whose power it records;
    ``poa``, ``ghi``: the logger of the POA sensor and of the GHI sensor (None: not logged)."""

    inverters: dict[str, tuple[str, ...]]
    poa: str | None = None
    ghi: str | None = None
    weather: dict[str, str] = dataclasses.field(default_factory=dict)  # model name -> logger


def loggers(site: Site) -> Loggers:
    """The site file's loggers as :class:`Loggers`; ``weather`` maps each site-weather
    channel, by the model's name (:data:`perfcheck.model.WEATHER`), to its logger."""
    def of(quantity: str) -> str | None:
        return next((lg.name for lg in site.loggers for c in lg.columns
                     if c.quantity == quantity), None)

    ids = {i.id for i in site.inverters}
    return Loggers({lg.name: tuple(sorted({c.device for c in lg.columns if c.device in ids
                                           and c.quantity in DEVICE_QUANTITIES}))
                    for lg in site.loggers}, of("poa"), of("ghi"),
                   {model.WEATHER[QUANTITIES[c.quantity][0]]: lg.name
                    for lg in site.loggers for c in lg.columns
                    if QUANTITIES[c.quantity][0] in model.WEATHER})


def moved_back(x: pd.Series | None, w: Wide, shifts: list[Shift], logger: str | None
               ) -> pd.Series | None:
    """A series on the rows of ``w`` derived from the channels of ``logger`` moved back by
    each shift of that logger inside its window, as :func:`corrected` moves the channels of
    the wide series (None and a series of another logger as they are)."""
    if x is None or logger is None:
        return x
    step = float(np.median(w.interval_s))
    out = x
    for s in shifts:
        n = int(round(s.offset_min * 60 / step))
        if s.logger != logger or n == 0:
            continue
        inside = (w.index >= s.start) & (w.index < s.end)
        out = out.copy() if out is x else out
        out.loc[inside] = x.shift(-n).to_numpy()[inside]
    return out


def follows(w: Wide, lg: Loggers, logger: str) -> tuple[list[str], bool]:
    """Which expected series are built from readings that ``logger`` records: the inverters
    whose expected power follows a sensor on it (the POA sensor drives
    :func:`perfcheck.detect.sensor.driven_columns`; a logged GHI the others), and whether the
    expected power from the modelled POA alone does (it comes from the GHI where one is logged,
    else from the POA sensor: :mod:`perfcheck.model`)."""
    ghi = has_ghi(w)
    out = set(driven_columns(w)) if lg.poa == logger else set()
    if ghi and lg.ghi == logger:
        out |= set(w.inverters) - set(driven_columns(w))
    modelled = (lg.ghi if ghi else lg.poa) == logger
    return [c for c in w.inverters if c in out], modelled


def centres(w: Wide, power: pd.DataFrame) -> pd.DataFrame:
    """Power-weighted mean time of each day [min since the day's first interval]."""
    t = ((w.index - w.index[0]) / pd.Timedelta(minutes=1)).to_numpy(dtype=float)
    t = t + w.interval_s.to_numpy() / 120.0  # interval mid-point
    days = w.day.to_numpy()
    p = power.clip(lower=0)
    num = p.mul(t, axis=0).groupby(days).sum(min_count=1)
    den = p.groupby(days).sum(min_count=1)
    return num / den


def midspans(w: Wide, x: pd.DataFrame, floor: pd.Series) -> pd.DataFrame:
    """Midpoint of each day's span above ``floor`` (per column): halfway between the first and
    the last interval whose value exceeds it [min, the origin of :func:`centres`]."""
    t = ((w.index - w.index[0]) / pd.Timedelta(minutes=1)).to_numpy(dtype=float)
    t = t + w.interval_s.to_numpy() / 120.0
    on = x.gt(floor.reindex(x.columns).to_numpy(), axis=1).to_numpy()
    g = pd.DataFrame(np.where(on, t[:, None], np.nan), index=x.index,
                     columns=x.columns).groupby(w.day.to_numpy())
    return (g.min() + g.max()) / 2


def independent(w: Wide, lg: Loggers) -> pd.DataFrame:
    """Per inverter, an expected power built from an irradiance sensor that another logger than
    the inverter's records (its clock is another): from the GHI where one is logged there, else
    from the POA sensor where it drives the inverter. Clouds move it as they move the power, so
    the daily centres of the two differ by the model's small bias alone. Inverters without one
    are left out."""
    own = {c: n for n, cs in lg.inverters.items() for c in cs}
    ghi, driven = has_ghi(w), set(driven_columns(w))
    cols = {}
    for c in w.inverters:
        if ghi and lg.ghi is not None and lg.ghi != own.get(c):
            cols[c] = w.expected_modelled[c]
        elif c in driven and lg.poa is not None and lg.poa != own.get(c):
            cols[c] = w.expected[c]
    return pd.DataFrame(cols, index=w.index)


def _daily_offsets(w: Wide, reference: pd.DataFrame, spans: bool = False) -> pd.DataFrame:
    """Daily centre of the measured power less that of ``reference`` [min] (``spans``: the
    midpoint of the day's span of production, power above 1 % of the AC rating, less that of
    the reference above zero: :func:`midspans`), on days with readings in at least 90 % of the
    reference's daylight intervals. Both levels are common practice: 1 % of the rating lies
    above a logger's night-time noise and is reached within minutes of the inverter starting."""
    ok = w.measured[reference.columns].notna() & reference.gt(0)
    days = w.day.to_numpy()
    ok_day = ok.groupby(days).sum() / reference.gt(0).groupby(days).sum()
    p = w.measured[reference.columns].where(ok)
    if spans:
        d = midspans(w, p, w.ac_w * 0.01) - midspans(w, reference, w.ac_w * 0)
    else:
        d = centres(w, p) - centres(w, reference.where(ok))
    return d.where(ok_day > 0.9)


def find(w: Wide, reference: pd.DataFrame, lg: Loggers,
         alpha: float = 1e-3, min_offset_min: float = 20.0, min_days: int = 3) -> list[Shift]:
    """Clock shifts of the measured power (see module docstring).

    A clock belongs to a logger (``lg``), so a shift is reported only when every inverter
    whose power that logger records shows it (this keeps a shade on one side of the day, which
    also moves the centre, from passing as a clock fault). An inverter with an expected power
    from another logger's sensor (:func:`independent`) is measured against it, else against
    the clear sky (``reference``).
    """
    d_span = _daily_offsets(w, reference, spans=True)
    ind = independent(w, lg)
    d_ind = _daily_offsets(w, ind) if len(ind.columns) else ind
    # the centres against the clear sky, of the inverters without another logger's sensor
    free = [c for c in w.inverters if c not in d_ind]
    d_all = _daily_offsets(w, reference[free]) if free else reference[free]
    found: list[Shift] = []
    for inv in w.inverters:
        against = "expected power from another logger's irradiance sensor" if inv in d_ind \
            else "clear-sky plane irradiance from the sun position"
        q = (d_ind[inv] if inv in d_ind else d_all[inv]).dropna()
        cut = segmented(q, alpha, min_days)
        if cut is None:
            continue
        x, segs, ref = cut
        cands = _windows(x, segs, ref, min_offset_min)
        if inv not in d_ind:  # against the clear sky the span proposes windows too
            cands += _span_windows(q.index, x, d_span[inv], cands, alpha, min_offset_min / 2,
                                   min_days)
        for g in cands:
            # the window against the reference segment's other days
            around = np.zeros(len(x), dtype=bool)
            around[ref.start:ref.stop] = True
            around[g.start:g.stop] = False
            inside, outside = x[g.start:g.stop], x[around]
            off = float(np.mean(inside) - np.mean(outside))
            if abs(off) < min_offset_min:
                continue
            t = stats.ttest_ind(inside, outside, equal_var=False)
            if not _p_value(t.pvalue, q.index[g.start], off, w.tz) < alpha:
                continue
            allq = d_span[inv]
            # each edge may move by up to EDGE_DAYS where a least-absolute-deviation split
            # says so: a cloudy day next to an edge can pull the segmentation's edge by a day.
            # The split is of the centres against another logger's sensor where clouds cancel
            # there, else of the span midpoints: clouds shorten the day's span of production at
            # both ends alike, a clock moves both ends, and the medians of the split are not
            # moved by one odd day
            edges = d_ind[inv] if inv in d_ind else allq
            e = pd.Timedelta(days=EDGE_DAYS)
            first, last = q.index[g.start], q.index[g.stop - 1]
            prev = max(q.index[max(g.start - 2, 0)] if g.start > 0
                       else allq.index[0] - pd.Timedelta(days=1), first - e)
            nxt = min(q.index[min(g.stop + 1, len(q) - 1)] if g.stop < len(q)
                      else allq.index[-1], last + e)
            d0 = refine_edge(edges, prev, q.index[min(g.start + 1, g.stop - 1)])
            d1 = refine_edge(edges, q.index[max(g.stop - 2, g.start)], nxt)
            # a clock moves the day's span of production with its centre; a loss on one side
            # of the day (a tracker stalled facing one way, a shade) moves the centre alone
            span = _span_change(allq, d0, d1, off, min_days)
            if span is None:
                continue
            found.append(Shift(
                pd.Timestamp(d0).tz_localize(w.tz).tz_convert("UTC"),
                pd.Timestamp(d1).tz_localize(w.tz).tz_convert("UTC"), float(off), (inv,),
                {"test": "Welch t", "p_value": float(t.pvalue), "days": g.stop - g.start,
                 "offset_min": off, "reference_centre_bias_min": float(np.mean(outside)),
                 "offset_standard_error_min": _se(inside, outside),
                 "production_span_shift_min": span, "measured_against": against}))
    out = []
    for s in _merge(found):
        name = next((n for n, g in lg.inverters.items() if g and set(g) <= set(s.inverters)),
                    None)
        if name is not None:
            out.append(daylight_saving(dataclasses.replace(s, logger=name), w.tz, alpha,
                                       partial(_left_after, w, reference, ind, lg)))
    return out


def _windows(x: np.ndarray, segs: list[Segment], ref: Segment, min_offset: float
             ) -> list[Segment]:
    """The windows off the reference level ``ref`` by at least ``min_offset``: runs of
    consecutive segments each that far off whose levels differ from the one before by less
    than ``min_offset``, joined. Against another logger's sensor the centres are so steady
    that the segmentation splits one offset where it wanders by a minute or two; a change
    smaller than the least offset reported is no new window."""
    out: list[Segment] = []
    last: Segment | None = None  # the last segment joined
    for g in segs:
        if g is ref or abs(g.mean - ref.mean) < min_offset:
            continue
        if last is not None and last.stop == g.start and abs(g.mean - last.mean) < min_offset:
            out[-1] = Segment(out[-1].start, g.stop, float(np.mean(x[out[-1].start:g.stop])))
        else:
            out.append(g)
        last = g
    return out


def _span_windows(days: pd.DatetimeIndex, x: np.ndarray, spans: pd.Series,
                  taken: list[Segment], alpha: float, min_shift: float, min_days: int
                  ) -> list[Segment]:
    """Windows proposed by the midpoints of the day's span of production (``spans``, against
    the clear sky: :func:`midspans`), as positions in ``days`` (those of the centres ``x``):
    segmented as the centres are, the runs off their reference by at least ``min_shift``
    (:func:`_windows`; half the least offset: a clock moves the midpoint by half its offset at
    least), less those that overlap a window of the centres (``taken``). Under a cloudy sky
    the span scatters by minutes where the centre scatters by tens, so it shows an offset
    of a few days that the centre's segmentation does not; the centre's own test still
    decides."""
    s = spans.dropna()
    cut = segmented(s, alpha, min_days)
    if cut is None:
        return []
    xs, segs, ref = cut
    out = []
    for g in _windows(xs, segs, ref, min_shift):
        a = int(days.searchsorted(s.index[g.start]))
        b = int(days.searchsorted(s.index[g.stop - 1], side="right"))
        if b - a >= min_days and not any(a < t.stop and t.start < b for t in taken):
            out.append(Segment(a, b, float(np.mean(x[a:b]))))
    return out


def _span_change(spans: pd.Series, d0: pd.Timestamp, d1: pd.Timestamp, off: float,
                 min_days: int) -> float | None:
    """The change [min] of the midpoint of the day's span of production (:func:`midspans`,
    less the reference's: :func:`_daily_offsets`) over the window [d0, d1) against as many
    days either side (:func:`perfcheck.detect.common.window_change`, isolated outliers
    removed as in the first test); None when it moved significantly less than half the
    centre's offset ``off`` the same way (one-sided Welch t test at
    :data:`perfcheck.detect.sensor.CONFIRM_ALPHA`), or when the days do not allow the test.

    A clock moves the first and the last interval of production by its offset, and the end
    that falls outside the reference's day is cut, so the midpoint moves by half the offset
    at least. A loss on one side of the day (a tracker stalled facing east or west, a shade)
    moves the power's centre by as much as an hour or two while the sun still starts and
    ends the production at nearly the same times; clouds shorten the span at both ends
    alike. The half is the bound of that geometry; the level the usual 5 % of a
    confirmation (common practice, as for the sensor's): the centre's own test bounds the
    false alarms.
    """
    ch = window_change(_despiked(spans), d0, d1, min_n=min_days)
    if ch is None:
        return None
    change, inside, around = ch
    half = off / 2
    if np.ptp(inside) == 0 and np.ptp(around) == 0:  # whole intervals every day: no spread
        short = abs(change) < abs(half) or np.sign(change) != np.sign(off)
    else:
        short = stats.ttest_ind(inside - half, around, equal_var=False,
                                alternative="less" if off > 0 else "greater"
                                ).pvalue < CONFIRM_ALPHA
    return None if short else float(change)


def _p_value(p_two: float, first_day: pd.Timestamp, off: float, tz: Any) -> float:
    """The test's p-value for a window whose first day is ``first_day`` (site-local) and
    offset ``off`` [min]: one-sided where the window begins within ``EDGE_DAYS`` of a
    daylight-saving change whose missed step has the offset's sign (the zone's calendar fixes
    that alternative, its time and direction, before the data are seen: a logger left on the
    old time), else the two-sided ``p_two`` of the Welch test."""
    day = pd.Timestamp(first_day).tz_localize(tz).tz_convert("UTC")
    e = pd.Timedelta(days=EDGE_DAYS + 1)
    if any(np.sign(step) == np.sign(off) for _, step in changes(tz, day - e, day + e)):
        return p_two / 2
    return p_two


def _despiked(x: pd.Series) -> pd.Series:
    """The days of ``x`` with a value, isolated outliers removed as in the first test (a day
    whose readings were not written for hours moves its centre by hours: without this, one
    such day inside a window inflates the Welch test's variance and hides the window)."""
    q = x.dropna()
    return pd.Series(despike(q.to_numpy()), index=q.index)


def _merge(found: list[Shift]) -> list[Shift]:
    """Windows of several inverters that overlap, with offsets within 15 min, become one; its
    edges are the medians of the inverters' edges (one logger's clock moves all its inverters
    at once: the median is the edge that a cloudy day on one inverter does not pull)."""
    groups: list[list[Shift]] = []
    for s in sorted(found, key=lambda s: s.start):
        for g in groups:
            if (s.start < max(x.end for x in g) and min(x.start for x in g) < s.end
                    and abs(s.offset_min - np.mean([x.offset_min for x in g])) < 15):
                g.append(s)
                break
        else:
            groups.append([s])
    out = []
    for g in groups:
        if len(g) == 1:
            out.append(g[0])
            continue
        starts, ends = sorted(x.start for x in g), sorted(x.end for x in g)
        out.append(Shift(starts[(len(g) - 1) // 2], ends[len(g) // 2],
                         float(np.mean([x.offset_min for x in g])),
                         tuple(i for x in g for i in x.inverters),
                         {**g[0].evidence, "per_inverter_offset_min": {
                             x.inverters[0]: x.offset_min for x in g},
                          # the same sky errs alike on every inverter: no smaller than one's
                          "offset_standard_error_min": float(np.mean(
                              [x.evidence["offset_standard_error_min"] for x in g]))}))
    return out


def _se(a: np.ndarray, b: np.ndarray) -> float:
    """Standard error of the difference of two means (Welch)."""
    return float(np.sqrt(np.var(a, ddof=1) / len(a) + np.var(b, ddof=1) / len(b)))


def changes(tz: Any, start: pd.Timestamp, end: pd.Timestamp) -> list[tuple[pd.Timestamp, float]]:
    """The daylight-saving changes of ``tz`` from ``start`` to ``end``: their instant (UTC) and
    the offset a logger that missed it writes [min] (spring: its labels an hour early, -60;
    autumn: late, +60)."""
    hours = pd.date_range(start.floor("h"), end.ceil("h"), freq="h", tz="UTC")
    off = np.array([h.tz_convert(tz).utcoffset().total_seconds() / 60.0 for h in hours])
    return [(hours[i], float(off[i - 1] - off[i])) for i in np.flatnonzero(np.diff(off)) + 1]


def daylight_saving(s: Shift, tz: Any, alpha: float,
                    left: Callable[[Shift], float] | None = None) -> Shift:
    """A shift that begins within ``EDGE_DAYS`` of a daylight-saving change of the site's zone
    and is that change (a logger left on the old time: -60 min in spring, +60 in autumn), set
    to it exactly: its start at the change's instant, its offset the change's step, and its
    end at the next change where it lies within ``EDGE_DAYS`` (a logger that keeps one time
    all year is right again then). It is that change when the change's step lies within the
    two-sided ``1 - alpha`` normal interval of the estimate, or when the readings moved back
    by the change's step leave no offset: ``left`` gives the p-value of the offset that
    remains (:func:`_left_after`), and a p-value of at least ``alpha`` does not reject the
    change. The change has no free parameter (its instant and step are known), the estimate
    three (start, end, offset); the simpler hypothesis is kept unless the data reject it.
    The second test catches an estimate biased toward zero (a day's first hour of power
    shifted before the reference's sunrise is cut off from the day's centre), whose small
    standard error would reject the change's step. Common practice: a logger kept on local
    time that misses a change is off by exactly that change's step from its instant on."""
    e = pd.Timedelta(days=EDGE_DAYS + 1)
    z = float(stats.norm.ppf(1 - alpha / 2))
    se = float(s.evidence.get("offset_standard_error_min", np.inf))
    for t0, step in changes(tz, s.start - e, s.start + e):
        back = [t for t, st in changes(tz, s.end - e, s.end + e) if st == -step and t > t0]
        dst = dataclasses.replace(
            s, start=t0, end=back[0] if back else s.end, offset_min=step,
            evidence={**s.evidence, "missed_daylight_saving_change": True,
                      "estimated_offset_min": s.offset_min})
        if abs(s.offset_min - step) <= z * se:
            return dst
        p = left(dst) if left is not None else float("nan")
        if p >= alpha:
            return dataclasses.replace(dst, evidence={**dst.evidence,
                                                      "offset_left_p_value": p})
    return s


def _left_after(w: Wide, reference: pd.DataFrame, ind: pd.DataFrame, lg: Loggers,
                s: Shift) -> float:
    """The p-value of the offset left when the readings of ``s`` are moved back by its
    offset (:func:`corrected`): the daily centre difference of its inverters' power, averaged
    over them, against the reference it was measured on (the expected power from another
    logger's sensor where they have one, else the clear-sky irradiance), inside its window
    against as many days either side (:func:`perfcheck.detect.common.window_change`), Welch
    t test. NaN where either side has too few days."""
    cols = list(s.inverters)
    ref = ind[cols] if set(cols) <= set(ind.columns) else reference[cols]
    d = _daily_offsets(corrected(w, [s], lg), ref).mean(axis=1)

    def day(ts: pd.Timestamp) -> pd.Timestamp:
        return ts.tz_convert(w.tz).tz_localize(None).normalize()

    ch = window_change(d, day(s.start), day(s.end))
    if ch is None:
        return float("nan")
    return float(stats.ttest_ind(ch[1], ch[2], equal_var=False).pvalue)


def corrected(w: Wide, shifts: list[Shift], lg: Loggers, site: Site | None = None,
              weather: Callable[[pd.Timestamp, pd.Timestamp], pd.DataFrame] | None = None
              ) -> Wide:
    """The series with every channel of the shifted logger moved back by the offset inside its
    window: the measured power of its inverters and the site weather it records, from which
    the model is run again over the window (:func:`rerun`; ``weather``: the site weather the
    model took between two instants, ``site`` the site it modelled). Without them the expected
    series built from a sensor the logger records (:func:`follows`) are shifted instead: right
    for an array in the sensor's plane, not for one transposed from it, whose expected power
    depends on the sun's position at the true time."""
    if not shifts:
        return w
    names = ("measured", "expected", "potential", "poa", "temp_cell", "expected_modelled",
             "potential_modelled", "poa_modelled", "from_sensor", "translated", "ghi")
    new = {k: getattr(w, k).copy(deep=False) for k in names}  # copied when written
    step = float(np.median(w.interval_s))
    for s in shifts:
        n = int(round(s.offset_min * 60 / step))
        if n == 0:
            continue
        inside = (w.index >= s.start) & (w.index < s.end)
        moved = [("measured", list(s.inverters))]
        recorded = [c for c, name in lg.weather.items() if name == s.logger]
        if recorded and site is not None and weather is not None:
            rerun(new, w, s, inside, n, step, recorded, site, weather)
        else:
            cols, modelled = follows(w, lg, s.logger)
            moved += [(k, cols) for k in ("expected", "potential", "poa", "temp_cell")]
            if modelled:
                moved += [(k, list(w.inverters)) for k in names[5:8]]
        for k, cs in moved:
            for c in cs:
                new[k].loc[inside, c] = getattr(w, k)[c].shift(-n).to_numpy()[inside]
    return dataclasses.replace(w, **new)


# the expected series of the model (long format, :func:`perfcheck.model.expected_power`) as
# the detectors hold them
MODEL_SERIES = {"expected": "ac_w", "potential": "ac_potential_w", "poa": "poa_global_wm2",
                "temp_cell": "temp_cell_c", "expected_modelled": "ac_modelled_w",
                "potential_modelled": "ac_potential_modelled_w",
                "poa_modelled": "poa_modelled_wm2"}


def rerun(new: dict[str, Any], w: Wide, s: Shift, at: np.ndarray, n: int, step: float,
          recorded: list[str], site: Site,
          weather: Callable[[pd.Timestamp, pd.Timestamp], pd.DataFrame]) -> None:
    """The model run again over the window of ``s`` (``at``: its rows of ``w``) on the site
    weather with the channels ``recorded`` by the shifted logger moved back by ``n``
    intervals of ``step`` seconds (the reading of each interval is the one labelled that
    much later), written into ``new`` (the :class:`Wide` fields by name) inside the window.
    The sun's position, the transposition to the other planes, the incidence angle and the
    cell temperature then follow the true time of each reading."""
    lag = pd.Timedelta(seconds=n * step)
    wx = weather(s.start - abs(lag), s.end + abs(lag))
    inside = (wx.index >= s.start) & (wx.index < s.end)
    for c in recorded:
        if c in wx:
            wx.loc[inside, c] = wx[c].reindex(wx.index + lag).to_numpy()[inside]
    wx = wx[inside]
    if wx.empty or not any(c in wx and wx[c].notna().any() for c in ("poa_sensor", "ghi")):
        return
    exp = model.expected_power(wx, model.site_sun(wx.index, site, step), site)
    rows = w.index[at]
    got = exp.pivot(index="ts", columns="inverter_id", values=list(MODEL_SERIES.values())
                    ).reindex(rows)  # the float columns in one pass, the source apart
    for k, col in MODEL_SERIES.items():
        new[k].loc[at, w.inverters] = got[col].reindex(columns=w.inverters).to_numpy()
    src = exp.pivot(index="ts", columns="inverter_id", values="poa_source").reindex(rows)
    src = src.reindex(columns=w.inverters).to_numpy()
    new["from_sensor"].loc[at, w.inverters] = src == "sensor"
    new["translated"].loc[at, w.inverters] = src == "translated"
    if "ghi" in recorded and "ghi" in wx:
        new["ghi"].loc[at] = wx["ghi"].reindex(rows).to_numpy()


def events(w_before: Wide, w_after: Wide, shifts: list[Shift], lg: Loggers,
           n_inverters: int) -> list[Event]:
    out = []
    step = w_before.interval_s.to_numpy()
    for s in shifts:
        cols, _ = follows(w_before, lg, s.logger)
        inside = (w_before.index >= s.start) & (w_before.index < s.end)
        gap_b = (w_before.expected - w_before.measured).to_numpy()[inside]
        gap_a = (w_after.expected - w_after.measured).to_numpy()[inside]
        change = float((np.nansum(gap_b * step[inside, None]) - np.nansum(
            gap_a * step[inside, None])) / 3.6e6)
        scope = "plant" if len(s.inverters) == n_inverters else f"inverter:{s.inverters[0]}"
        out.append(Event(kind="clock_fault", scope=scope, start=s.start, end=s.end,
                         energy_loss_kwh=0.0, energy_loss_kwh_low=0.0, energy_loss_kwh_high=0.0,
                         method=METHOD, evidence=s.evidence,
                         detail={"offset_min": round(s.offset_min, 1),
                                 "direction": "labels late" if s.offset_min > 0
                                 else "labels early",
                                 "inverters": list(s.inverters), "logger": s.logger,
                                 "poa_sensor_on_same_clock": lg.poa == s.logger,
                                 "expected_shifted_for": cols,
                                 "correction": f"shift readings by {-s.offset_min:+.0f} min",
                                 "shortfall_change_kwh": change}))
    return out


def shift_frame(frame: pd.DataFrame, shifts: list[Shift], devices: dict[str, list[str]]
                ) -> pd.DataFrame:
    """Readings with the clock faults corrected, for a correction on request.

    ``frame`` is long-format readings (``ts`` UTC, ``device``, ...), e.g. the ``readings``
    table; ``devices`` maps each shift's inverter ids to the devices logged on the same clock
    (the inverters, and ``site`` where the weather sensors share the logger). Rows of those
    devices inside a shift's window get ``ts - offset`` (rounded to the minute); other rows
    are returned unchanged. Pure: the caller decides whether to store the result.
    """
    out = frame.copy()
    ts = pd.to_datetime(out["ts"], utc=True)
    for s in shifts:
        devs = sorted({d for inv in s.inverters for d in devices.get(inv, [inv])})
        sel = out["device"].isin(devs).to_numpy() & (ts >= s.start).to_numpy() & (
            ts < s.end).to_numpy()
        offset = pd.Timedelta(minutes=round(s.offset_min))
        ts = ts.where(~sel, ts - offset)
    out["ts"] = ts
    return out
