"""Curtailment: output held on a plateau below what the plant could deliver, either by every
inverter at once (a set-point from the grid operator or the plant controller) or with the
plant total at its export limit. Kept apart from clipping (one inverter at its own limit).

Shared plateau: in the same intervals every producing inverter holds a flat level (relative
change to a neighbouring interval within the plateau tolerance, three times the interval noise)
while its expected power is above that level by more than ``margin`` (three times the
interval-level spread of measured/expected), for at least ``min_minutes``, with the plant
total within the hold of a set-point (+-0.5 %). Held level: a limit at the grid point holds
the plant total, not each inverter, and on a cloudy day or with a limit near the plant's
output it bites only now and then; a day on which the plant total comes back to one level
more often than power that follows the sun can (a binomial test with its false-alarm rate,
:func:`_held_level`) while the expected power moves and the plant delivers less of it there
is held too. A level held on one day is looked for on the others: a day that sits at it
more often than the other days do by chance (a binomial test at the same rate,
:func:`_recurring`) is held there too, however few its intervals. Either way every interval
of that day at the level counts. Export limit: the
plant total within the tolerance of ``export_limit_kw`` while the sum of the unlimited
expected powers (each capped at its inverter rating) is above it; since the expected series
already stops at the export limit, that energy is a design fact and is reported as such.
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
    for day in np.unique(days[mask]):
        sel = mask & (days == day)
        pos = np.flatnonzero(sel)
        e = float(np.nansum(energy[sel] * step[sel]) / 3.6e6)
        g = float(np.nansum(gap[sel] * step[sel]) / 3.6e6)
        low, high = energy_band(e, rel_sigma)
        held = evidence.get("_level")
        ev = {k: v for k, v in evidence.items() if k != "_level"}
        if held is not None:
            ev["plateau_level_share_of_rating"] = float(np.nanmedian(held[sel]))
        ev["intervals"] = int(sel.sum())
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
    for day in np.unique(days[cand]):
        today = days == day
        sel = np.flatnonzero(cand & today)
        if len(sel) < min_count:
            continue
        v = np.sort(level[sel])
        hi = np.searchsorted(v, v * (1 + 2 * HOLD), side="right")
        counts = hi - np.arange(len(v))
        best = int(np.argmax(counts))
        if counts[best] < min_count:
            continue
        centre = float(np.median(v[best:hi[best]]))
        near = np.abs(level - centre)
        held = sel[near[sel] <= HOLD * centre]
        around = int((near[sel] <= 10 * HOLD * centre).sum())
        rest = up & today & (near > HOLD * centre)
        if not rest.any():
            continue
        dense = stats.binomtest(len(held), around, TOP_SHARE, alternative="greater").pvalue
        if (dense <= alpha and _flatter(level[held], exp_level[held], tol)
                and np.median(ratio[held]) < np.median(ratio[rest])):
            out[held] = True
    return out


def _recurring(level: np.ndarray, exp_level: np.ndarray, days: np.ndarray, keep: np.ndarray,
               margin: float, alpha: float) -> np.ndarray:
    """Days on which the plant holds a set-point already found on another day, even for a few
    intervals: a plant controller's limit comes back at the same level.

    For each level held on a found day (the median of its held intervals), an interval *sits*
    at it when the plant power is within +-``HOLD`` of it while the expected power is above it
    by the ``margin``. How often that happens by chance is counted on the other days that
    have such expected power (a rate with one sitting interval added, so never zero: Laplace's
    rule of succession); a day on which more intervals sit at the level than that rate gives
    by chance (one-sided binomial test at ``alpha``, the false-alarm rate per day and level)
    is held too. Days with no found level are never tested.

    References
    ----------
    Conover 1999, Practical Nonparametric Statistics, 3rd ed., sec. 3.1 (the binomial test;
    from memory); Laplace's rule of succession (common practice).
    """
    out = np.zeros(len(level), dtype=bool)
    found = np.unique(days[keep])
    centres: list[float] = []
    for day in found:
        c = float(np.median(level[keep & (days == day)]))
        if all(abs(c - x) > HOLD * x for x in centres):
            centres.append(c)
    if not centres:
        return out
    done = np.isin(days, found)
    with np.errstate(invalid="ignore"):
        for c in centres:
            above = (exp_level >= c * (1 + margin)) & ~done
            sits = above & (np.abs(level - c) <= HOLD * c)
            n_all, k_all = int(above.sum()), int(sits.sum())
            for day in np.unique(days[sits]):
                today = days == day
                n, k = int((above & today).sum()), int((sits & today).sum())
                rate = (k_all - k + 1) / (n_all - n + 1)
                if stats.binom.sf(k - 1, n, rate) <= alpha:
                    out |= sits & today
    return out


def _whole_day(keep: np.ndarray, level: np.ndarray, exp_level: np.ndarray, days: np.ndarray,
               tol: float, margin: float) -> np.ndarray:
    """Extend each day's curtailed runs to every interval of that day held at the same level
    (within the tolerance) while the expected power is above it by the margin."""
    out = keep.copy()
    for day in np.unique(days[keep]):
        sel = days == day
        lv = float(np.median(level[keep & sel]))
        near = sel & (np.abs(level - lv) <= tol * lv) & (exp_level >= lv * (1 + margin))
        out |= near
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
    # and the plant total within the hold of a set-point (+-HOLD) over the run
    for a, b in runs(shared_np & (n_flat >= need)):
        if (b - a >= min_len and _flatter(tot_m[a:b], tot_e[a:b], margin)
                and _spread(tot_m[a:b]) <= 2 * HOLD):
            keep[a:b] = True
    level, exp_level = tot_m / w.ac_w.sum(), tot_e / w.ac_w.sum()
    held = _held_level(level, exp_level, w.day.to_numpy(), tol, min_len, alpha)
    # shared: on a held day every producing inverter delivers less of its expected power on
    # the held intervals than on the rest of the day (one inverter at its own limit is the
    # clipping detector's)
    ratio = (m / e).where(producing & e.gt(0)).to_numpy()
    for day in np.unique(w.day.to_numpy()[held]):
        today = w.day.to_numpy() == day
        sel = held & today
        on, off = np.nanmedian(ratio[sel], axis=0), np.nanmedian(ratio[today & ~sel], axis=0)
        if not (on < off).all():
            held[sel] = False
    keep |= held
    keep |= _recurring(level, exp_level, w.day.to_numpy(), keep, margin, alpha)
    keep = _whole_day(keep, level, exp_level, w.day.to_numpy(), tol, margin)
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
