"""The loss ledger: per interval and inverter, expected energy, each cause's loss, the
unexplained rest and the measured energy, with nothing counted twice.

The ledger's expected energy is the design's at its ageing allowance, with the irradiance
sensor's suspect windows rebuilt from modelled irradiance; its measured energy is the readings
with the clock faults shifted back. Corrections (:mod:`perfcheck.kinds`, class ``correction``)
therefore cost nothing: they change the reference, not the plant. On the intervals that have
both, the shortfall is split in this order (each step works on what the steps before left):

1. Whole intervals (class ``interval``), in the order ``outage``, ``clipping`` (a limit below the
   rating), ``curtailment``: each interval an event of that kind covers, counted against the
   inverter's local level L: loss = L x expected - measured. The expected series of an
   inverter is off by a factor that persists for weeks (true mismatch, spectrum, incidence
   angle: model error, not noise); L, the measured over the expected energy of the days
   around the event on the intervals no interval-class event takes, outside the windows of
   the faults that take the inverter off its own level for a while (:data:`OFF_LEVEL`)
   (:func:`perfcheck.detect.common.local_level`, on intervals like the event's), is what the
   plant delivered then, so the model's local bias stays unexplained instead of landing in
   the event; where the other inverters are free on most of the event's intervals and this
   one's level relative to theirs is read more closely than its own (they share the sky's
   and the season's model error), L is what they delivered there times that relative level
   (:meth:`_Levels.beside`); where the expected series stops at a cap (rating, export
   limit), the level scales the unlimited power and the cap holds (:func:`would_deliver`).
   The share-type causes of step 2 found on the same intervals (a stalled row, soiling) lower
   what the inverter could deliver: L is taken against the expected power less them, and they
   scale it at the event too (:func:`_kept`), so that a limit on a stalled day does not take
   the stall's loss. Inside the window of lost strings (:data:`AT_LEVEL`) the event costs
   what the inverter would have delivered as it was, with the strings lost: the share lost of
   L x expected is the strings' (entered under their event), the rest less the measured power
   the event's.
2. Shares of the remaining intervals' expected power (class ``share``), one after another:
   ``degradation`` (beyond the site file's ageing allowance), ``soiling``, ``shading``,
   ``tracker_stall``, ``tracker_out_of_step``, ``partial_outage``: loss = share x (expected
   less the losses of the shares before it); a share measured against the inverter's own level
   (:data:`AT_LEVEL`) is scaled by that level too (measured over what the shares before it
   left, on the days around the event).
3. ``underperformance`` (class ``residual``): in each period flagged by the baseline CUSUM, what
   steps 1-2 leave, when it is significant: above 3 times the daily relative model error (at
   least 1 %) times the period's expected energy (model errors taken as fully correlated over
   the period, conservative; one-sided false-alarm probability 0.13 % per flagged period), and
   with the period's level shift at least 3 standard errors against the model's seasonal
   error, on what steps 1-2 leave unexplained (:func:`perfcheck.detect.baseline.shift_z`,
   :func:`perfcheck.detect.baseline.remaining_levels`).
4. Unexplained: the rest (noise and model error, either sign).

An event found by a loss of class ``interval`` or in :data:`AT_LEVEL` takes its energy and its
95 % band from here: the level's standard error (the spread of the days around the event,
heavy tails and autocorrelation included: :func:`perfcheck.detect.common.local_level`) times
the energy the inverter would have delivered, with the share's own error where there is one
(taken as independent of the level's, added in quadrature), added linearly over the rows, and
for the whole intervals the interval noise of the event's days (:meth:`_Levels.scatter`),
which weighs where an event takes few intervals; where lost strings were found to start on
the event's day after some of its intervals, the band reaches down by what they would have
taken there (:func:`_unseen`).

Clipping at the AC rating (class ``design``) lies inside the expected series; its energy, the
unlimited expected power above the rating, is recorded beside the losses, never among them.
The intervals it holds at the rating take no share-type loss (a DC-side loss does not lower an
output held at the rating); their small gap stays unexplained.

Every entry names its event, so an event's energy over any window is the sum of its entries
there, and expected - measured = sum of the losses + unexplained holds on any window.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perfcheck import kinds
from perfcheck.detect.baseline import Flagged, remaining_levels, shift_z
from perfcheck.detect.common import (
    MODEL_FLOOR,
    Z95,
    Event,
    Footprint,
    Wide,
    daylight,
    energy_band,
    local_level,
    long_run_sigma,
    scope_of,
)
from perfcheck.lazy import lazy_module

stats = lazy_module("scipy.stats")

Z_UNDER = 3.0  # one-sided 0.13 % per flagged period
# share-class kinds whose share is measured against the inverter itself (its own level before
# and after), so their loss is counted against its local level like the interval losses
AT_LEVEL = ("partial_outage",)
# share-class kinds that take an inverter off its own level for a while and end (lost strings,
# a stalled tracker): the level an interval-class loss is counted against is read outside them
OFF_LEVEL = (*AT_LEVEL, "tracker_stall", "tracker_out_of_step")


@dataclass
class Entry:
    """The energy one event takes from some intervals: ``power_w[i]`` at row ``rows[i]`` of
    column ``cols[i]`` (a loss, or for a design event the energy it keeps out of the expected
    series)."""

    event: Event
    rows: np.ndarray
    cols: np.ndarray
    power_w: np.ndarray


@dataclass
class Ledger:
    """Per interval (rows) and inverter (columns): power [W] over the interval ``interval_s``."""

    index: pd.DatetimeIndex
    inverters: list[str]
    interval_s: np.ndarray
    measured_w: np.ndarray  # clock faults shifted back; NaN where none
    expected_w: np.ndarray  # at the ageing allowance, sensor fallback applied; NaN where none
    poa: np.ndarray  # plane-of-array irradiance behind expected_w [W/m^2]
    entries: list[Entry] = field(default_factory=list)

    @property
    def both(self) -> np.ndarray:
        return np.isfinite(self.measured_w) & np.isfinite(self.expected_w)

    def loss_w(self) -> np.ndarray:
        """Sum of the loss entries per interval and inverter [W]."""
        out = np.zeros_like(self.expected_w)
        for e in self.entries:
            if kinds.is_loss(e.event.kind):
                np.add.at(out, (e.rows, e.cols), e.power_w)
        return out

    def unexplained_w(self) -> np.ndarray:
        """Expected - measured - losses on the intervals with both; NaN elsewhere."""
        gap = self.expected_w - self.measured_w
        return np.where(self.both, gap - self.loss_w(), np.nan)

    def energy_kwh(self, entry: Entry) -> float:
        return float(np.sum(entry.power_w * self.interval_s[entry.rows]) / 3.6e6)


def _scope_cols(ev: Event, col_pos: dict[str, int]) -> list[int]:
    if ev.scope == "plant":
        return list(col_pos.values())
    return [col_pos[ev.scope.split(":", 1)[1]]]


def _window_rows(index: pd.DatetimeIndex, ev: Event) -> slice:
    return slice(int(index.searchsorted(ev.start)), int(index.searchsorted(ev.end)))


def build(w: Wide, events: list[Event], masks: dict[str, pd.DataFrame],
          prints: list[Footprint], design: dict[int, pd.DataFrame], flagged: list[Flagged],
          rel_sigma: float, absolute_rel: tuple[float, float] = (0.0, 0.0),
          repaired: np.ndarray | None = None) -> tuple[Ledger, list[Event]]:
    """The ledger of the corrected series ``w`` and the ``underperformance`` events.

    Parameters
    ----------
    w : the series after the clock and sensor corrections
    events : every event found so far (interval-class events take the intervals of their
        kind's mask inside their window and scope)
    masks : per interval-class kind, the (interval x inverter) mask of its intervals
    prints : the share-class footprints
    design : per design event (by ``id``), the power it keeps out of the expected series [W]
    flagged : the baseline test's flagged periods
    rel_sigma : daily relative model error [-]
    absolute_rel : relative standard uncertainty of the expected power's absolute level
        where it comes from the plane-of-array sensor and where from modelled irradiance
        [-]: an event with too few days around to read a local level is counted against the
        expected power itself, whose irradiance calibration then no longer cancels
    repaired : per interval, inside a window whose data a correction rebuilt (sensor, clock):
        the expected power there carries the repair's error, not the array's level, so the
        underperformance test judges no level on it (as the other slow statistics)
    """
    cols = w.inverters
    col_pos = {c: i for i, c in enumerate(cols)}
    led = Ledger(index=w.index, inverters=cols, interval_s=w.interval_s.to_numpy(dtype=float),
                 measured_w=w.measured.to_numpy(dtype=float),
                 expected_w=w.expected.to_numpy(dtype=float), poa=w.poa.to_numpy(dtype=float))
    both = led.both
    valid = both & daylight(w).to_numpy() & ~w.flagged.to_numpy()
    days = w.day.to_numpy()
    gap = np.where(both, led.expected_w - led.measured_w, 0.0)
    taken = np.zeros_like(both)
    picked: list[tuple[Event, np.ndarray]] = []
    for kind in (k.name for k in kinds.TABLE if k.ledger == "interval"):
        if kind not in masks:
            continue
        mk = masks[kind].reindex(columns=cols).fillna(False).to_numpy(dtype=bool) & both
        for ev in (e for e in events if e.kind == kind):
            sl = _window_rows(w.index, ev)
            sub = np.zeros_like(mk)
            ci = _scope_cols(ev, col_pos)
            sub[sl, ci] = mk[sl][:, ci] & ~taken[sl][:, ci]
            picked.append((ev, sub))
            taken |= sub
    # intervals held at the AC rating by design: the output stays at the rating whatever
    # happens on the DC side, so no share-type cause can take from them
    held = np.zeros_like(both)
    if "clipping" in masks:
        clip = masks["clipping"].reindex(columns=cols).fillna(False).to_numpy(dtype=bool)
        for ev in (e for e in events if id(e) in design):
            sl, ci = _window_rows(w.index, ev), _scope_cols(ev, col_pos)
            held[sl, ci] = clip[sl][:, ci]
    free = both & ~taken & ~held
    # seconds since the local midnight: each run of a day's rows takes its midnight put in the
    # zone once (as DatetimeIndex.normalize puts every row's)
    days = w.day.to_numpy()
    first = np.r_[True, days[1:] != days[:-1]]
    midnight = pd.DatetimeIndex(days[first]).tz_localize(w.tz)[np.cumsum(first) - 1]
    slot = np.asarray((w.index.tz_convert(w.tz) - midnight).total_seconds(), dtype=np.int64)
    # the shares judged against the inverter's own level (lost strings) hold on every interval
    # of their window, those of an interval-class event too: where they lie, their share and
    # its error
    own_prints = [fp for fp in prints if fp.event.kind in AT_LEVEL]
    which = np.full(both.shape, -1)
    cut = np.zeros(both.shape)
    for k, fp in enumerate(own_prints):
        ci = [col_pos[c] for c in fp.cols]
        which[fp.lo:fp.hi, ci] = k
        cut[fp.lo:fp.hi, ci] = fp.factor
    cut_sigma = np.array([fp.factor_rel_sigma for fp in own_prints] + [0.0])[which]
    off = np.zeros_like(both)
    for fp in prints:
        if fp.event.kind in OFF_LEVEL:
            off[fp.lo:fp.hi, [col_pos[c] for c in fp.cols]] = True
    # the other share-type causes found lower what the plant could deliver on the intervals
    # they cover, in the days around an event as on its own intervals: its level is judged
    # against the expected power less them, and they lower what it would have delivered
    kept, kept_rel = _kept(led.expected_w.shape,
                           [fp for fp in prints if fp.event.kind not in AT_LEVEL], col_pos)
    sensor = w.from_sensor.reindex(columns=cols).fillna(False).to_numpy(dtype=bool)
    absolute = np.where(sensor, absolute_rel[0], absolute_rel[1])
    levels = _Levels(led.measured_w, led.expected_w * kept, valid & free & ~off, days, slot,
                     absolute)
    potential = w.potential.reindex(columns=cols).to_numpy(dtype=float)
    carried: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = []
    for ev, sub in picked:
        rows, cc = np.nonzero(sub)
        lv, rel = levels.at(rows, cc)
        # the event costs what the inverter would have delivered as it was (its strings
        # lost, if any): what the lost strings took of it is theirs (their event's entry)
        s, s_rel = cut[rows, cc], cut_sigma[rows, cc]
        exp, pot = led.expected_w[rows, cc], potential[rows, cc]
        lk, k_rel = lv * kept[rows, cc], np.hypot(rel, kept_rel[rows, cc])
        would = would_deliver(lk, exp, pot)
        lost = would - would_deliver(lk * (1 - s), exp, pot)
        _enter(led, Entry(ev, rows, cc, would - lost - led.measured_w[rows, cc]),
               np.hypot((would - lost) * k_rel, lost * s_rel),
               (would - lost) * levels.scatter(rows, cc),
               _unseen(led, own_prints, col_pos, rows, cc, days, lk, exp, pot))
        carried.append((which[rows, cc], rows, cc, lost, lost * np.hypot(k_rel, s_rel)))
    left = np.where(free, led.expected_w, 0.0)
    explained = np.zeros_like(left)
    for kind in (k.name for k in kinds.TABLE if k.ledger == "share"):
        kind_prints = [p for p in prints if p.event.kind == kind]
        if kind in AT_LEVEL and kind_prints:
            own = np.zeros_like(both)
            for fp in kind_prints:
                own[fp.lo:fp.hi, [col_pos[c] for c in fp.cols]] = True
            levels = _Levels(led.measured_w, left, valid & free & ~own, days, slot, absolute)
        for fp in kind_prints:
            ci = [col_pos[c] for c in fp.cols]
            sub = left[fp.lo:fp.hi][:, ci]
            loss = np.where(free[fp.lo:fp.hi][:, ci], sub * fp.factor, 0.0)
            rows, cc = np.nonzero(loss)
            r, c = rows + fp.lo, np.asarray(ci)[cc]
            if kind in AT_LEVEL:
                # what the strings take of the inverter's output at its level, held at the
                # cap where the expected series stops at one (:func:`would_deliver`)
                lv, rel = levels.at(r, c)
                f, lf = fp.factor[rows, cc], left[r, c]
                with np.errstate(invalid="ignore", divide="ignore"):
                    pot = potential[r, c] * lf / led.expected_w[r, c]
                loss[rows, cc] = (would_deliver(lv, lf, pot)
                                  - would_deliver(lv * (1 - f), lf, pot))
                k = own_prints.index(fp)
                parts = [(r, c, loss[rows, cc],
                          loss[rows, cc] * np.hypot(rel, fp.factor_rel_sigma))]
                parts += [(rr[on], cr[on], p[on], sg[on])
                          for wh, rr, cr, p, sg in carried if (on := wh == k).any()]
                r_all, c_all, p_all, s_all = (np.concatenate(x) for x in zip(*parts, strict=True))
                _enter(led, Entry(fp.event, r_all, c_all, p_all), s_all)
            else:
                led.entries.append(Entry(fp.event, r, c, loss[rows, cc]))
            left[fp.lo:fp.hi, ci] = sub - loss
            explained[fp.lo:fp.hi, ci] += loss
    for ev in events:
        if id(ev) in design:
            d = design[id(ev)].reindex(columns=cols).fillna(0.0).to_numpy(dtype=float)
            _add(led, ev, d != 0, d)
    residual = np.where(free, gap - explained, 0.0)
    judged = free if repaired is None else free & ~repaired[:, None]
    under = _underperformance(w, led, residual, np.where(free, led.expected_w, 0.0), flagged,
                              rel_sigma, col_pos, free, judged)
    return led, under


def _kept(shape: tuple[int, ...], prints: list[Footprint], col_pos: dict[str, int]
          ) -> tuple[np.ndarray, np.ndarray]:
    """Per interval and inverter, the share of the expected power that the share-type
    footprints leave, taken one after another as in step 2 (the product of 1 - share), and
    its relative standard error from the shares' own (share x its relative error over the
    share left, in quadrature)."""
    kept, var = np.ones(shape), np.zeros(shape)
    for fp in prints:
        if fp.factor is not None:
            ci = [col_pos[c] for c in fp.cols]
            f = np.clip(np.nan_to_num(fp.factor), 0.0, 0.99)
            kept[fp.lo:fp.hi, ci] *= 1.0 - f
            var[fp.lo:fp.hi, ci] += (f * fp.factor_rel_sigma / (1.0 - f)) ** 2
    return kept, np.sqrt(var)


def would_deliver(level: np.ndarray, expected: np.ndarray, potential: np.ndarray
                  ) -> np.ndarray:
    """What an inverter at the performance level ``level`` would deliver [W]: ``level`` times
    its unlimited expected power (``potential``), held at the cap the expected series stops at
    where it stops at one (the AC rating or the plant's export limit: ``expected`` below the
    unlimited power; a level under 1 does not lower an output held at its cap unless it takes
    the power below it). Without an unlimited power, ``level`` times ``expected``."""
    unlimited = np.where(np.isfinite(potential), np.maximum(potential, expected), expected)
    return np.where(unlimited > expected, np.minimum(level * unlimited, expected),
                    level * expected)


@dataclass
class _Levels:
    """What an inverter delivered of a reference power (``measured`` over ``reference`` on the
    intervals ``sel``), to judge an event's intervals by."""

    measured: np.ndarray
    reference: np.ndarray
    sel: np.ndarray
    days: np.ndarray  # site-local day of each row
    slot: np.ndarray  # site-local time of day of each row [s]
    absolute: np.ndarray  # relative standard uncertainty of the reference's absolute level

    def daily(self, j: int, rows: np.ndarray, like: int = 2) -> pd.Series:
        """Per day, inverter ``j``'s measured over reference energy on intervals like the
        event's ``rows``: at their times of day and with a reference power within theirs
        (``like`` 2; the model's bias depends on the sun's path and on the light: an event at
        a clear noon is judged by the clear noons around it, not by cloudy ones), at their
        times of day only (1), or on all intervals (0); NaN on a day whose reference energy
        there is under a quarter of the median day's (the insolation-weighted index of
        :func:`perfcheck.detect.common.daily_pi`)."""
        return _day_ratio(*self._sums(j, rows, like))

    def _sums(self, j: int, rows: np.ndarray, like: int) -> tuple[pd.Series, pd.Series]:
        """Per day, inverter ``j``'s measured and reference energy on the intervals
        :meth:`daily` takes."""
        ref = self.reference[:, j]
        on = self.sel[:, j].copy()
        if like >= 2:
            with np.errstate(invalid="ignore"):
                on &= ((ref >= np.nanmin(ref[rows])) & (ref <= np.nanmax(ref[rows]))
                       if np.isfinite(ref[rows]).any() else False)
        if like >= 1:
            on &= np.isin(self.slot, np.unique(self.slot[rows]))
        m = pd.Series(np.where(on, self.measured[:, j], 0.0)).groupby(self.days).sum()
        r = pd.Series(np.where(on, ref, 0.0)).groupby(self.days).sum()
        return m, r

    def scatter(self, rows: np.ndarray, cc: np.ndarray) -> np.ndarray:
        """Per entry ``(rows, cc)``: the interval-scale relative error of the expected power
        on the entry's day, from that day's log measured/reference on the intervals ``sel``
        of its inverter, scaled so that ``Z95`` times it bounds the day's noise at 95 % (0
        with fewer than 4 of them). Its slow part, over the hours of the day, is the level's
        (:meth:`daily` judges the event by the same times of day), so the scale is read off
        the differences from one interval to the next; the fast part is wide on a day of
        broken cloud, when a sensor at one point and an array over a field see different
        light, and weighs where an event takes few intervals. There it is heavy tailed, and
        a sum over a few intervals carries the tail, so the scale is the root mean square of
        the successive differences over sqrt 2 (von Neumann, Kent, Bellinson & Hart 1941,
        Ann. Math. Stat. 12(2):153), not a robust one; being estimated from the day's m
        intervals, it is widened by Student's t quantile over the normal one (Student 1908,
        Biometrika 6(1):1) on m // 2 degrees of freedom, those of the disjoint pairs' squared
        differences, which the overlapping ones estimate at least as well."""
        out = np.zeros(len(rows))
        for j in np.unique(cc):
            for day in np.unique(self.days[rows[cc == j]]):
                on = self.sel[:, j] & (self.days == day)
                with np.errstate(invalid="ignore", divide="ignore"):
                    x = np.log(self.measured[on, j] / self.reference[on, j])
                x = x[np.isfinite(x)]
                if len(x) < 4:
                    continue
                sig = math.sqrt(float(np.mean(np.diff(x) ** 2)) / 2)
                t = float(stats.t.ppf(0.975, len(x) // 2)) / Z95
                out[(cc == j) & (self.days[rows] == day)] = sig * t
        return out

    def at(self, rows: np.ndarray, cc: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per entry ``(rows, cc)``: its inverter's local level around the entry's days on
        intervals like the entry's (:meth:`daily`, :func:`perfcheck.detect.common.local_level`;
        where too few days around have such intervals, as for a few intervals at a rare
        power, on the same times of day only, then on all intervals) and the level's relative
        standard error; or, where the other inverters read it more closely, that level
        through theirs (:meth:`beside`). The level is read through the same irradiance as the
        entry, days away, so the sensor's calibration cancels (its drift over a few weeks is
        far below the 1 % floor); with too few days around at all, the level is 1 and the
        reference's absolute uncertainty (``absolute``) joins the error in quadrature."""
        level, rel = np.ones(len(rows)), np.zeros(len(rows))
        for j in np.unique(cc):
            on = cc == j
            r = rows[on]
            for like in (2, 1, 0):
                lv, s = local_level(self.daily(j, r, like), self.days[r].min(),
                                    self.days[r].max())
                if math.isfinite(lv):
                    break
            if math.isfinite(lv):
                level[on], rel[on] = min((lv, s), self.beside(j, r, like), key=lambda x: x[1])
            else:
                rel[on] = np.hypot(s, self.absolute[r, j])
        return level, rel

    def beside(self, j: int, rows: np.ndarray, like: int) -> tuple[float, float]:
        """Inverter ``j``'s level on its ``rows`` read through the other inverters: what they
        delivered of their reference on those rows, times ``j``'s level relative to theirs
        on the days around (the local level, :func:`perfcheck.detect.common.local_level`, of
        the ratio of the daily levels, :meth:`daily`, on intervals like the rows), and that
        relative level's standard error; (NaN, inf) where the others are free on no more than
        half of the rows (most of the event's own intervals must be read, not inferred) or the
        ratio has too few days. Inverters under one sky share the weather's and the season's
        model error (cloud, low sun, spectrum), which the ratio cancels: where they do, its
        error is far below that of the inverter's own level (a month-long derate in winter,
        judged by a handful of clear noons around it), and :meth:`at` takes the reading with
        the smaller error (the comparison with neighbouring inverters: common practice).
        """
        others = [k for k in range(self.measured.shape[1]) if k != j]
        free = self.sel[np.ix_(rows, others)]
        if not others or not free.any(axis=1).mean() > 0.5:
            return float("nan"), math.inf
        sums = [self._sums(k, rows, like) for k in others]
        x = self.daily(j, rows, like) / _day_ratio(sum(m for m, _ in sums),
                                                   sum(r for _, r in sums))
        ratio, s = local_level(x.where(np.isfinite(x)), self.days[rows].min(),
                               self.days[rows].max())
        if not math.isfinite(ratio):
            return float("nan"), math.inf
        m = self.measured[np.ix_(rows, others)][free]
        ref = self.reference[np.ix_(rows, others)][free]
        return ratio * float(np.sum(m) / np.sum(ref)), s


def _day_ratio(m: pd.Series, r: pd.Series) -> pd.Series:
    """Measured over reference energy per day; NaN on a day whose reference energy is under a
    quarter of the median day's (:meth:`_Levels.daily`)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return (m / r).where(r > 0.25 * r[r > 0].median())


def _unseen(led: Ledger, own_prints: list[Footprint], col_pos: dict[str, int],
            rows: np.ndarray, cc: np.ndarray, days: np.ndarray, lk: np.ndarray,
            exp: np.ndarray, pot: np.ndarray) -> float:
    """What lost strings would take of an interval event's energy [kWh] on its intervals
    before their window's found start on the same day: while the event holds an inverter
    (off, or at its share of a set-point) it delivers the same with strings lost or not, so
    the data cannot tell when in those intervals they went; that start is not identified,
    and the event's energy lies anywhere from its estimate down to the estimate less
    this."""
    out = 0.0
    for fp in own_prints:
        share = np.broadcast_to(fp.factor, (fp.hi - fp.lo, len(fp.cols)))[0]
        for k, col in enumerate(fp.cols):
            on = (cc == col_pos[col]) & (rows < fp.lo) & (days[rows] == days[fp.lo])
            lost = (would_deliver(lk[on], exp[on], pot[on])
                    - would_deliver(lk[on] * (1 - share[k]), exp[on], pot[on]))
            out += float(np.sum(lost * led.interval_s[rows[on]]) / 3.6e6)
    return out


def _enter(led: Ledger, entry: Entry, sigma_w: np.ndarray,
           noise_w: np.ndarray | None = None, unseen_kwh: float = 0.0) -> None:
    """Add ``entry`` and state its event's energy as the entry's, with the 95 % band of the
    standard error ``sigma_w`` per row [W], added linearly over the rows (the level's error
    is shared by the intervals of an inverter, and by the inverters through the weather),
    and of the interval noise ``noise_w`` per row [W] (added linearly over the inverters of
    an interval, which share the weather, and in quadrature over the intervals). Where the
    data leave part of the energy unidentified (``unseen_kwh`` that may or may not belong to
    it, :func:`_unseen`), the band spans the whole identified range and the statistical band
    beyond each end (the bound of Imbens & Manski 2004, Econometrica 72(6):1845, taken at
    its conservative, union form)."""
    led.entries.append(entry)
    e = led.energy_kwh(entry)
    s = float(np.sum(sigma_w * led.interval_s[entry.rows]) / 3.6e6)
    if noise_w is not None:
        per_row = pd.Series(noise_w * led.interval_s[entry.rows] / 3.6e6).groupby(
            entry.rows).sum().to_numpy()
        s = math.hypot(s, float(np.sqrt(np.sum(per_row ** 2))))
    entry.event.energy_loss_kwh = e
    entry.event.energy_loss_kwh_low = max(0.0, min(e, e - Z95 * s) - unseen_kwh)
    entry.event.energy_loss_kwh_high = e + Z95 * s


def _add(led: Ledger, ev: Event, sel: np.ndarray, power: np.ndarray) -> None:
    rows, cols = np.nonzero(sel)
    led.entries.append(Entry(ev, rows, cols, power[rows, cols]))


def _underperformance(w: Wide, led: Ledger, residual: np.ndarray, expected: np.ndarray,
                      flagged: list[Flagged], rel_sigma: float, col_pos: dict[str, int],
                      free: np.ndarray, judged: np.ndarray) -> list[Event]:
    days = w.day.to_numpy()
    step = led.interval_s
    levels = remaining_levels(w, residual, np.where(judged, expected, np.nan)) if flagged else {}
    sigmas = {inv: long_run_sigma(x.to_numpy())[0] for inv, x in levels.items()}
    out = []
    for f in flagged:
        j = col_pos[f.inverter]
        sel = (days >= np.datetime64(f.first_day)) & (days <= np.datetime64(f.last_day))
        x = levels[f.inverter]
        a, b = x.index.searchsorted(f.first_day), x.index.searchsorted(f.last_day, "right")
        z_shift = shift_z(x, a, b, sigmas[f.inverter])
        u = float(np.sum(residual[sel, j] * step[sel]) / 3.6e6)
        # model errors persist over days (season, weather regime): the period's relative error
        # is taken as large as a single day's (fully correlated), a conservative bound
        sigma = max(rel_sigma, MODEL_FLOOR) * float(np.sum(expected[sel, j] * step[sel]) / 3.6e6)
        if not (u > Z_UNDER * sigma and u > 0 and z_shift >= Z_UNDER):
            continue
        low, high = energy_band(u, 0.0, sigma)
        ev = Event(
            kind="underperformance", scope=scope_of(f.inverter),
            start=pd.Timestamp(f.first_day).tz_localize(w.tz).tz_convert("UTC"),
            end=(pd.Timestamp(f.last_day) + pd.Timedelta(days=1)).tz_localize(w.tz)
            .tz_convert("UTC"),
            energy_loss_kwh=u, energy_loss_kwh_low=max(0.0, low), energy_loss_kwh_high=high,
            method="baseline regression residuals, lower CUSUM (Page 1954); what the detectors "
                   "do not explain",
            evidence={"test": "lower CUSUM of standardised daily residuals",
                      "cusum_min": f.cusum_min, "baseline_shortfall_kwh": f.shortfall_kwh,
                      "z": u / sigma if sigma > 0 else None, "shift_z": z_shift},
            detail={"cause": "unknown"})
        rows = np.flatnonzero(sel & free[:, j])
        led.entries.append(Entry(ev, rows, np.full(len(rows), j), residual[rows, j]))
        out.append(ev)
    return out
