"""Curtailment: output held on a plateau below what the plant could deliver, either by every
inverter at once (a set-point from the grid operator or the plant controller) or with the
plant total at its export limit. Kept apart from clipping (one inverter at its own limit).

Shared plateau: in the same intervals every producing inverter holds a flat level (relative
change to a neighbouring interval within the plateau tolerance, three times the interval noise)
while its expected power is above that level by more than ``margin`` (three times the
interval-level spread of measured/expected), for at least ``min_minutes``, with the plant total
within the hold of a set-point (+-0.5 %) for longer than chance holds power with no limit
(:func:`_held_by_chance`, the false-alarm rate per day ``alpha``). Held level: a limit at the
grid point holds the plant total, not each inverter, and on a cloudy day or with a limit near
the plant's output it bites only now and then; a day on which the plant total comes back to one
level more often than power that follows the sun can (a binomial test with its false-alarm
rate, :func:`_held_level`) while the expected power moves and the plant delivers less of it
there is held too. A level held on one day is looked for on the others: a day whose power lands
on it, where it would deliver more, more often than its own scatter gives by chance (a Poisson
bound at the same rate, :func:`_recurring`) is held there too, however few its intervals.
Either way every interval of that day at the level counts. Export limit: the plant total
within the tolerance of ``export_limit_kw`` while the sum of the unlimited expected powers
(each capped at its inverter rating) is above it; since the expected series already stops
at the export limit, that energy is a design fact and is reported as such.
The multiples are common practice (no source).

References
----------
IEC TS 61724-2:2016 treats operation limited by the inverter and by the interconnection
separately (from memory).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perfcheck.detect.common import (
    Event,
    Wide,
    day_rows,
    energy_band,
    plateaus,
    runs,
)
from perfcheck.lazy import lazy_module

stats = lazy_module("scipy.stats")

METHOD_SHARED = ("shared plateau: every inverter flat below its expected power at the same "
                 "time (interval noise test, common practice)")
METHOD_EXPORT = "plant total held at the export limit while the plant could deliver more"


def _events(mask: np.ndarray, w: Wide, energy: np.ndarray, gap: np.ndarray, rel_sigma: float,
            method: str, evidence: dict, detail: dict) -> list[Event]:
    """One event per site-local day with masked intervals (a set-point is a day's order; the
    energy here is the whole shortfall's, which the ledger counts against the inverters'
    local level, :mod:`perfcheck.detect.attribution`)."""
    step = w.interval_s.to_numpy()
    days = w.day.to_numpy()
    out = []
    for _, today in day_rows(days, mask):
        pos = today[mask[today]]
        e = float(np.nansum(energy[pos] * step[pos]) / 3.6e6)
        g = float(np.nansum(gap[pos] * step[pos]) / 3.6e6)
        low, high = energy_band(e, rel_sigma)
        held = evidence.get("_level")
        ev = {k: v for k, v in evidence.items() if k != "_level"}
        if held is not None:
            ev["plateau_level_share_of_rating"] = float(np.nanmedian(held[pos]))
        ev["intervals"] = len(pos)
        out.append(Event(
            kind="curtailment", scope="plant", start=w.index[pos[0]],
            end=w.index[pos[-1]] + pd.Timedelta(seconds=float(step[pos[-1]])),
            energy_loss_kwh=e, energy_loss_kwh_low=max(low, 0.0), energy_loss_kwh_high=high,
            method=method, evidence=ev, detail={**detail, "shortfall_kwh": g}))
    return out


def _spread(x: np.ndarray) -> float:
    """Relative spread of a power series: its 10-90 % range over its mean [-]."""
    return float(np.subtract(*np.nanpercentile(x, [90, 10])) / max(np.nanmean(x), 1e-9))


def _flatter(m: np.ndarray, e: np.ndarray, margin: float) -> bool:
    """The run's measured spread (:func:`_spread`) under half the expected one's, and the
    expected one at least ``margin`` (while the expected power is flat too, as at a clear
    noon, a held power cannot be told from a lower but healthy one)."""
    rm, re = _spread(m), _spread(e)
    return bool(rm <= 0.5 * re and re >= margin)


# the hours around an interval whose measured/expected it is judged by: the model's bias moves
# with the sun's path over the day, little within an hour either side (common practice)
LOCAL = "2h"
HOLD = 0.005  # a set-point holds the power within +-0.5 % (common practice, no source)
# Share of a band's time that its top tenth takes when the power passes a smooth maximum: the
# time within a depth d below a parabolic top grows as sqrt(d), so the top tenth of the depth
# holds sqrt(0.1) of it. Power that follows the sun puts at most this share of the intervals
# within +-10 HOLD of a level into +-HOLD of it (the densest case: a clear-sky noon).
TOP_SHARE = float(np.sqrt(0.1))


def _held_level(level: np.ndarray, exp_level: np.ndarray, days: np.ndarray, tol: float,
                min_count: int, alpha: float) -> np.ndarray:
    """Days on which the plant power returns to one level again and again while it could
    deliver more: the intervals within +-``HOLD`` of the day's most visited level (at least
    ``min_count`` of them), when

    1. the level stands out of its surroundings: of the intervals within +-10 ``HOLD`` of it,
       more lie within +-``HOLD`` than a smooth maximum puts there (one-sided binomial test
       against :data:`TOP_SHARE` at ``alpha``: the false-alarm rate per day);
    2. the expected power moves where the measured one holds: the measured relative range
       (10-90 %) over the held intervals at most half the expected one's, and the expected
       one beyond the flatness tolerance ``tol`` (common practice);
    3. the plant delivers less of its expected power there: the median measured/expected of
       the held intervals below that of the rest of the day's producing intervals.

    A set-point under broken clouds passes all three; a clear noon fails 2, power that only
    scatters fails 1. Levels at the rating (clipping) are left out.

    References
    ----------
    Conover 1999, Practical Nonparametric Statistics, 3rd ed., sec. 3.1 (the binomial test;
    from memory).
    """
    out = np.zeros(len(level), dtype=bool)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = level / exp_level
    up = np.isfinite(ratio) & (level > 0.05) & (exp_level > 0.05)
    cand = up & (level < 0.98)
    for _, today in day_rows(days, cand):
        sel = today[cand[today]]
        if len(sel) < min_count:
            continue
        v = np.sort(level[sel])
        hi = np.searchsorted(v, v * (1 + 2 * HOLD), side="right")
        counts = hi - np.arange(len(v))
        best = int(np.argmax(counts))
        if counts[best] < min_count:
            continue
        centre = float(np.median(v[best:hi[best]]))
        near = np.abs(level[sel] - centre)
        held = sel[near <= HOLD * centre]
        around = int((near <= 10 * HOLD * centre).sum())
        rest = today[up[today] & (np.abs(level[today] - centre) > HOLD * centre)]
        if not len(rest):
            continue
        dense = stats.binomtest(len(held), around, TOP_SHARE, alternative="greater").pvalue
        if (dense <= alpha and _flatter(level[held], exp_level[held], tol)
                and np.median(ratio[held]) < np.median(ratio[rest])):
            out[held] = True
    return out


def _held_by_chance(tot_m: np.ndarray, tot_e: np.ndarray, up: np.ndarray, a: int, b: int,
                    per_day: int) -> float:
    """Chance that power with no limit holds the plant total of rows ``a:b`` as flat as it is
    there, somewhere in a day of ``per_day`` steps (a bound; the false-alarm probability per
    day of a shared run).

    Held within +-``HOLD``, each step's change of ln(total) is within +-2 ``HOLD``: the step
    of ln(measured/expected) has to land within +-2 ``HOLD`` of minus the expected's own step.
    The chance of each is read off the plant's own steps of ln(measured/expected) between
    producing intervals (``up``) at a like light level (expected total within a factor of two
    of the run's median: at dawn and dusk the model's error jumps more), with half a landing
    added so that it is never zero (the Jeffreys prior); the steps are taken as independent,
    so the run's chance is their product, and a run could start at any step of its day
    (Bonferroni over ``per_day`` starts). A run of a few intervals at a cloud edge, where the
    sensor sees a jump the array does not, is within chance; a set-point held for an hour
    while the expected power moves is not.

    References
    ----------
    Jeffreys 1946, Proc. R. Soc. Lond. A 186:453 (the prior that adds half an event; from
    memory); Bonferroni bound over the start positions: Glaz, Naus & Wallenstein 2001, Scan
    Statistics, ch. 1 (from memory).
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        lr, le = np.log(tot_m / tot_e), np.log(tot_e)
    both = up[1:] & up[:-1] & np.isfinite(lr[1:]) & np.isfinite(lr[:-1])
    mid = 0.5 * (le[1:] + le[:-1])
    ref = np.sort(np.diff(lr)[both & (np.abs(mid - np.median(le[a:b])) <= np.log(2.0))])
    de = np.diff(le[a:b])
    hits = (np.searchsorted(ref, -de + 2 * HOLD, side="right")
            - np.searchsorted(ref, -de - 2 * HOLD, side="left"))
    return float(min(1.0, per_day * np.prod((hits + 0.5) / (len(ref) + 1))))


def _local(x: np.ndarray, index: pd.DatetimeIndex, days: np.ndarray) -> np.ndarray:
    """Per interval, the median of ``x`` (NaN left out) over the :data:`LOCAL` window centred
    on it (at least three values; for a 2-D ``x`` per column): the level of the hours around
    it; where those hours have fewer (a limit held for hours, or the plant down for part of
    the day), the median of its site-local day (again at least three values)."""
    frame = pd.DataFrame(x, index=index)
    near = frame.rolling(LOCAL, center=True, min_periods=3).median()
    by_day = frame.groupby(days)
    whole = by_day.transform("median").where(by_day.transform("count") >= 3)
    return near.fillna(whole).to_numpy().reshape(np.shape(x))


def _recurring(level: np.ndarray, exp_level: np.ndarray, days: np.ndarray, keep: np.ndarray,
               ratio: np.ndarray, tol: float, alpha: float, index: pd.DatetimeIndex
               ) -> np.ndarray:
    """Days on which the plant holds a set-point already found on another day, even for a few
    intervals: a plant controller's limit comes back at the same level.

    For each level held on a found day (the median of its held intervals), an interval *sits*
    at it when the plant power is within +-``HOLD`` of it while what the plant would deliver
    there is above it by the flatness tolerance ``tol``: the expected power times the plant's
    own measured/expected in the hours around it (:func:`_local`, on the intervals off the
    level), so that the model's bias of the day and hour drops out and only interval noise is
    left. Under no limit, an interval that would deliver W lands on the level when its
    measured/expected falls that far below the hours around it; the chance of that is read
    off the same day's own intervals off the level (their share in the band, with half a
    landing added so that it is never zero: the Jeffreys prior), so a day of broken cloud, on
    which the power scatters widely, sets its own, higher chance. The number of sitting
    intervals is tested against the sum of those chances (one-sided, Poisson, which bounds the
    tail of a sum of unequal independent trials from above; ``alpha`` is the false-alarm rate
    per day and level; on invented levels over ten suite plants it flagged 4 days of about
    1 300 tested, so its true rate may be up to a few times ``alpha``). A day passes when it
    also holds the limit in common: on its sitting intervals every producing inverter's
    measured/expected (``ratio``, interval x inverter) lies below that of the hours around it
    by ``tol`` too (median; a set-point scales every inverter alike, one inverter at its own
    limit beside others that follow the sun is not one). Days with no found level are never
    tested. Where none of the day's own intervals lands in an interval's band, its chance is
    below what the day's few intervals can resolve (the half landing alone would hold it at
    1 / (2 (n + 1)), so that one sitting interval could pass only on a day of more than
    1 / (2 ``alpha``) intervals): it is then read off every interval of the record at a like
    light level and hour of the day (:func:`_like_light`, again with half a landing), whose
    drops near noon are far smaller than at dawn and dusk; where the day has drops in the
    band, the larger of the two chances counts. (At a like light level alone, a tracker
    plant whose measured/expected sags every evening passed two evening intervals on a
    found level.) (Pooling the days, each drop in its own day's scale, was tried:
    on heavy-tailed days drops of many times their scale recur, and it did not lift the
    floor; at a like light level the drops of such days are in the record as they are.)

    References
    ----------
    Hoeffding 1956, Ann. Math. Statist. 27(3):713 (a sum of unequal Bernoulli trials is less
    spread than the binomial, and so than the Poisson, of the same mean; from memory);
    Jeffreys 1946, Proc. R. Soc. Lond. A 186:453 (the prior that adds half an event; from
    memory).
    """
    out = np.zeros(len(level), dtype=bool)
    found = np.unique(days[keep])
    centres: list[float] = []
    for _, today in day_rows(days, keep):
        c = float(np.median(level[today[keep[today]]]))
        if all(abs(c - x) > HOLD * x for x in centres):
            centres.append(c)
    if not centres:
        return out
    done = np.isin(days, found)
    hour = ((index - index.normalize()) / pd.Timedelta(hours=1)).to_numpy(dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        plant = level / exp_level
        up = np.isfinite(plant) & (level > 0.05) & (exp_level > 0.05)
        for c in centres:
            at = np.abs(level - c) <= HOLD * c
            local = _local(np.where(up & ~at, plant, np.nan), index, days)
            would = local * exp_level
            above = up & (would >= c * (1 + tol)) & ~done
            sits = above & at
            drop = ratio / _local(np.where(at[:, None], np.nan, ratio), index, days)
            pooled = _like_light(plant / local, exp_level, up & ~at & np.isfinite(local),
                                 hour)
            for _, today in day_rows(days, sits):
                # the day's own drops (measured/expected over that of the hours around) off
                # the level: how often each interval that could lie above it lands on it
                off = today[up[today] & ~at[today] & np.isfinite(local[today])]
                ref = np.sort(plant[off] / local[off])
                rows = today[above[today]]
                lo, hi = c * (1 - HOLD) / would[rows], c * (1 + HOLD) / would[rows]
                hits = (np.searchsorted(ref, hi, side="right")
                        - np.searchsorted(ref, lo, side="left"))
                # none of the day's own lands there: the whole record's at a like light
                # level tells how rare that is (never below the day's own where it has some)
                own = np.where(hits > 0, (hits + 0.5) / (len(ref) + 1), 0.0)
                chance = float(np.sum(np.maximum(own, pooled(exp_level[rows], hour[rows], lo, hi))))
                on = today[sits[today]]
                if (_every_below(drop[on], tol)
                        and stats.poisson.sf(len(on) - 1, chance) <= alpha):
                    out[on] = True
    return out


def _like_light(drop: np.ndarray, exp_level: np.ndarray, ok: np.ndarray, hour: np.ndarray):
    """The chance that an interval's ``drop`` (measured/expected over that of the hours
    around it) lands in a band, read off every interval ``ok`` of the record whose expected
    power ``exp_level`` is within a factor of two of the one asked about (at dawn and dusk
    the model's error jumps more than near noon, as in :func:`_held_by_chance`) and whose
    ``hour`` of the day (UTC) is within an hour of its own (the model's error follows the
    sun's path: rows that shade each other in the evening drop every evening), with half a
    landing added so that it is never zero (the Jeffreys prior). Returns ``chance(light,
    hour, lo, hi)`` over arrays of intervals."""
    light = np.log(exp_level[ok])
    order = np.argsort(light)
    light, d, h = light[order], drop[ok][order], hour[ok][order]

    def chance(at: np.ndarray, when: np.ndarray, lo: np.ndarray, hi: np.ndarray
               ) -> np.ndarray:
        a = np.searchsorted(light, np.log(at) - np.log(2.0), side="left")
        b = np.searchsorted(light, np.log(at) + np.log(2.0), side="right")
        near = [np.abs(h[i:j] - t) <= 1.0 for i, j, t in zip(a, b, when, strict=True)]
        hits = np.array([np.count_nonzero(k & (d[i:j] >= x) & (d[i:j] <= y))
                         for k, i, j, x, y in zip(near, a, b, lo, hi, strict=True)])
        return (hits + 0.5) / (np.array([k.sum() for k in near]) + 1)

    return chance


def _every_below(drop: np.ndarray, tol: float) -> bool:
    """Every inverter with values (columns of ``drop``) at least ``tol`` below 1 in median."""
    ok = np.isfinite(drop).any(axis=0)
    if not ok.any():
        return False
    return bool((np.nanmedian(drop[:, ok], axis=0) * (1 + tol) <= 1).all())


def _shared(held: np.ndarray, ratio: np.ndarray, days: np.ndarray) -> np.ndarray:
    """``held`` kept on the days on which every producing inverter delivers less of its
    expected power (``ratio``: measured/expected per interval and inverter) on the held
    intervals than on the rest of the day (median): a set-point is shared, one inverter at its
    own limit is the clipping detector's."""
    out = held.copy()
    for _, today in day_rows(days, held):
        sel = today[held[today]]
        with np.errstate(invalid="ignore"):
            on = np.nanmedian(ratio[sel], axis=0)
            off = np.nanmedian(ratio[today[~held[today]]], axis=0)
        if not (on < off).all():
            out[sel] = False
    return out


def _whole_day(keep: np.ndarray, level: np.ndarray, exp_level: np.ndarray, days: np.ndarray,
               tol: float, margin: float) -> np.ndarray:
    """Extend each day's curtailed runs to every interval of that day held at the same level
    (within the tolerance) while the expected power is above it by the margin. Not by the
    tolerance: an interval on the level whose expected power the interval noise raised by a
    few per cent would then enter, its loss in the ledger that noise, and on days of broken
    cloud that outweighs the limited intervals the margin leaves out."""
    out = keep.copy()
    for _, today in day_rows(days, keep):
        lv = float(np.median(level[today[keep[today]]]))
        out[today[(np.abs(level[today] - lv) <= tol * lv)
                  & (exp_level[today] >= lv * (1 + margin))]] = True
    return out


def detect(w: Wide, rel_sigma: float, step_noise: float, spread: float, exclude: pd.DataFrame,
           min_minutes: float = 30.0, alpha: float = 1e-3) -> tuple[list[Event], pd.DataFrame]:
    """Curtailment events and the (interval x inverter) mask of curtailed intervals
    (``levels``: daily performance index per inverter, for the energy band; ``alpha``: the
    false-alarm rate per day of the held-level test, :func:`_held_level`)."""
    tol = max(3 * step_noise, 0.005)
    margin = max(3 * spread, 0.05)
    step_s = float(np.median(w.interval_s))
    min_len = max(3, int(np.ceil(min_minutes * 60 / step_s)))
    m, e = w.measured, w.expected
    flat = pd.DataFrame(False, index=w.index, columns=w.inverters)
    for inv in w.inverters:
        flat[inv] = plateaus(m[inv].to_numpy(), e[inv].to_numpy(), tol, margin, min_len)
    producing = m.gt(w.ac_w * 0.02, axis=1) & ~exclude
    shared = (flat | ~producing).all(axis=1) & producing.any(axis=1) & flat.any(axis=1)
    shared_np = shared.to_numpy()
    # runs of the shared state that are long enough on their own
    # a set-point holds the power flat while the expected power moves: the measured plant
    # power's range over the run must be under half the expected power's range
    keep = np.zeros(len(shared_np), dtype=bool)
    tot_m = m.where(producing).sum(axis=1).to_numpy()
    tot_e = e.where(producing).sum(axis=1).to_numpy()
    n_flat = (flat & producing).sum(axis=1).to_numpy()
    need = min(2, len(w.inverters))
    # and the plant total within the hold of a set-point (+-HOLD) over the run, held longer
    # than chance holds power with no limit (false-alarm rate alpha per day)
    up = producing.all(axis=1).to_numpy() & (tot_e > 0)
    days = w.day.to_numpy()
    for a, b in runs(shared_np & (n_flat >= need)):
        if (b - a >= min_len and _flatter(tot_m[a:b], tot_e[a:b], margin)
                and _spread(tot_m[a:b]) <= 2 * HOLD
                and _held_by_chance(tot_m, tot_e, up, a, b,
                                    int(np.sum(up[days == days[a]]))) <= alpha):
            keep[a:b] = True
    level, exp_level = tot_m / w.ac_w.sum(), tot_e / w.ac_w.sum()
    held = _held_level(level, exp_level, days, tol, min_len, alpha)
    # shared: on a held day every producing inverter delivers less of its expected power on
    # the held intervals than on the rest of the day (one inverter at its own limit is the
    # clipping detector's)
    ratio = (m / e).where(producing & e.gt(0)).to_numpy()
    keep |= _shared(held, ratio, days)
    keep |= _recurring(level, exp_level, days, keep, ratio, tol, alpha, w.index)
    keep = _whole_day(keep, level, exp_level, days, tol, margin)
    mask = producing & pd.DataFrame(
        np.repeat(keep[:, None], len(w.inverters), axis=1), index=w.index, columns=w.inverters)
    gap = (e - m).where(mask).sum(axis=1).to_numpy()
    level = (m.where(mask).sum(axis=1) / w.ac_w.sum()).to_numpy()
    events = _events(keep, w, gap, gap, rel_sigma, METHOD_SHARED,
                     {"tolerance": tol, "margin": margin, "_level": level},
                     {"design": False, "cause": "set-point below nameplate on all inverters"})
    if w.export_limit_w:
        lim = float(w.export_limit_w)
        total = m.sum(axis=1, min_count=1).to_numpy()
        could = w.potential.clip(upper=w.ac_w, axis=1).sum(axis=1).to_numpy()
        at_limit = (np.abs(total - lim) <= tol * lim) & (could > lim * (1 + tol)) & ~keep
        extra = np.where(at_limit, could - lim, 0.0)
        gap_lim = np.where(at_limit, (e - m).sum(axis=1).to_numpy(), 0.0)
        events += _events(at_limit, w, extra, gap_lim, rel_sigma, METHOD_EXPORT,
                          {"export_limit_w": lim, "tolerance": tol},
                          {"design": True, "cause": "export limit of the site (design)"})
        mask = mask | pd.DataFrame(np.repeat(at_limit[:, None], len(w.inverters), axis=1),
                                   index=w.index, columns=w.inverters)
    return events, mask
