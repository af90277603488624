"""Clipping: measured power held at the inverter's AC limit while the unlimited expected power
is above it.

Per inverter, the limit actually held is estimated from the data: the median measured power
over the intervals where the unlimited model exceeds the rating by more than the interval
noise. An interval is clipped when the unlimited expected power is above that limit and the
measured power sits within the plateau tolerance of it. The energy is the unlimited expected
power minus the limit, summed. With the limit at the rating this is the natural clipping of a
high DC/AC ratio: a design fact, reported as its own kind ``design_clipping``; the expected
series already stops at the rating, so its energy is kept beside the losses, never among them.
A limit clearly below the rating (beyond the tolerance) is a derated inverter (kind
``clipping``): then the shortfall of those intervals is attributed to clipping.

Derates are found first, day by day (:func:`derated_days`): on a *held* day the inverter's
highest power of the day is a plateau (at least ``min_minutes`` of intervals within the
tolerance of it) below the rating while its expected power stands above it by the margin and
moves (over those intervals the measured power's relative range at most half the expected
power's: at a broad noon peak the power follows the expected curve, under a limit it does
not), and the day's other readings on the plateau are at least 1/``alpha`` times as likely
under a limit there as without one (:func:`plateau_log_lr`; without a limit that happens
with probability at most ``alpha``, whatever the logger's interval). The same limit held on
at least two days, with no day between on which the inverter rose above it, is one derate
(a setting that persists, where a grid operator's order limits the plant on a day: common
practice). A day *rose above* the limit when two of its readings exceed it by more than the
plateau's tolerance (:func:`plateau_tolerance`: the normal quantile at the detectors'
``alpha`` times the noise of the readings on the held plateaus), or one exceeds it by more
than any of the day's readings would under the limit at that rate (:func:`days_above`).

Held days need clear skies; the derate's window is then widened on either side to the
farthest day that still *shows* the limit (:func:`days_at`: two readings on the plateau while
the expected power stands above it and moves), up to a day that rose above it. A day whose
expected power never reaches the limit (cloud, low sun) shows nothing either way, a single
reading on the plateau little: the true boundary lies between the last day with evidence
and the day above the limit, which the event's evidence names, and the window ends at the
posterior median of the days between, weighed by the likelihood ratio of their readings on
the plateau (:func:`plateau_log_lr`; midway where none is), the expected error of each such
edge in days stated beside it (:func:`_widen`). A day on which every
sibling stood below its expected power by the margin while this inverter was held is left to
the curtailment detector (a shared set-point). The design clipping is then estimated outside
the derates.

References
----------
Perry, Muller & Anderson 2021, "Performance comparison of clipping detection techniques in AC
power time series", IEEE PVSC 48 (NREL/CP-5K00-78954): plateau detection on AC power; the
threshold form used here is common practice.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import partial
from statistics import NormalDist
from typing import NamedTuple

import numpy as np
import pandas as pd

from perfcheck.detect.common import Event, Wide, energy_band, robust_sigma, scope_of
from perfcheck.lazy import lazy_module

special = lazy_module("scipy.special")
stats = lazy_module("scipy.stats")

METHOD = ("plateau at the inverter's AC limit while unlimited expected power exceeds it "
          "(in the spirit of Perry, Muller & Anderson 2021)")


METHOD_DERATE = ("daily ceiling held flat below the AC rating while the expected power exceeds it, "
                 "the same limit on consecutive days, widened to the days that still show it "
                 "(plateau test, common practice)")


def held_flat(measured: pd.DataFrame | pd.Series, expected: pd.DataFrame | pd.Series,
              held: pd.DataFrame | pd.Series, days: np.ndarray) -> pd.DataFrame | pd.Series:
    """Per day: True where, over the ``held`` intervals, the measured power's relative range
    is at most half the expected power's (a limit holds the power while the expected power
    moves; at a broad noon peak the power follows the expected curve)."""
    def rel_range(f: pd.DataFrame | pd.Series) -> pd.DataFrame | pd.Series:
        g = f.where(held).groupby(days)
        return (g.max() - g.min()) / g.mean()

    return rel_range(measured) <= 0.5 * rel_range(expected)


def derated_days(w: Wide, exclude: pd.DataFrame, tol: float, margin: float,
                 alpha: float, min_minutes: float = 30.0) -> pd.DataFrame:
    """Per site-local day and inverter: the power limit held that day [W] (NaN: none).

    Held: at least ``min_minutes`` of intervals within ``tol`` of the day's highest power,
    that power below the rating by more than ``tol`` and above a tenth of it, the expected
    power above it by ``margin`` on those intervals, and the day's other readings on that
    plateau (:func:`plateau_log_lr`, half-width ``tol``) at least 1/``alpha`` times as likely
    under a limit there as without one. The highest reading is left out of that ratio: the
    level is chosen at it, so it lies on the plateau under either hypothesis. Without a limit
    the likelihood ratio has expectation 1 (under its censored normal model), so it reaches
    1/``alpha`` with probability at most ``alpha`` (Markov's inequality; Ville 1939, Etude
    critique de la notion de collectif, from memory). A broad noon peak of a plant running
    below its expected power puts a few readings within ``tol`` of the peak while the
    expected power moves and stands above it by the margin; the day's own ratio of measured
    to expected power then predicts those readings and the ratio stays near 1."""
    m = w.measured.where(~exclude)
    days = w.day.to_numpy()
    top = m.groupby(days).transform("max")
    held = ((m - top).abs() <= tol * top) & w.expected.ge(top * (1 + margin))
    minutes = held.mul(w.interval_s.to_numpy() / 60, axis=0).groupby(days).sum()
    ceiling = m.groupby(days).max()
    moves = held_flat(w.measured, w.expected, held, days)
    ok = (minutes >= min_minutes) & moves & ceiling.lt(w.ac_w * (1 - tol), axis=1) & ceiling.gt(
        w.ac_w * 0.1, axis=1)
    at_top = m.eq(top)  # the day's highest reading left out: its first interval
    others = m.where(~(at_top & at_top.groupby(days).cumsum().eq(1)))
    for inv in w.inverters:
        lr = plateau_log_lr(others[inv], w.expected[inv], days, top[inv].to_numpy(), tol, alpha)
        ok[inv] &= lr.reindex(ok.index).fillna(0.0) >= np.log(1 / alpha)
    if len(w.inverters) > 1:
        # a shared set-point: while this inverter is held, every sibling is below its
        # expected power by the margin too (the curtailment detector's case)
        ratio = w.measured / w.expected.where(w.expected > 0)
        for inv in w.inverters:
            sib = ratio.drop(columns=inv).where(held[inv], axis=0)
            below = sib.groupby(days).median().le(1 - margin)
            ok[inv] &= ~below.all(axis=1)
    return ceiling.where(ok)


def plateau_tolerance(measured: pd.Series, limit: pd.Series, days: np.ndarray, tol: float,
                      alpha: float) -> float:
    """Relative half-width of a held limit's plateau [-]: z(1 - alpha/2) times the noise of
    the measured power on the held days' intervals within ``tol`` of their limit
    (:func:`perfcheck.detect.common.robust_sigma`), at least 0.005 (``tol``'s floor) and at
    most ``tol`` (``limit``: the held limit per day, NaN on the other days)."""
    lv = limit.reindex(days).to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        x = measured.to_numpy() / lv - 1
    x = x[np.isfinite(x) & (x >= -tol) & (x <= tol)]
    if len(x) < 3:
        return tol
    z = NormalDist().inv_cdf(1 - alpha / 2)
    return float(min(tol, max(z * robust_sigma(x), 0.005)))


def days_above(measured: pd.Series, days: np.ndarray, level: float, tol_p: float,
               alpha: float = 1e-3, expected: pd.Series | None = None) -> pd.Series:
    """Per day: the inverter delivered more than a limit at ``level`` allows, either

    - at least two intervals above it by more than the plateau tolerance ``tol_p`` (under
      the limit each reading passes that bound with probability alpha/2, two in a day of n
      readings with about (n alpha / 2)^2 / 2), or
    - one interval above it by more than the bound that any of the day's n readings passes
      under the limit with probability alpha/2 at most: z(1 - alpha / (2 n)) plateau noise
      sigmas, sigma being ``tol_p`` over z(1 - alpha/2) (the Bonferroni bound; with
      ``tol_p`` at its floor, sigma is overstated and the bound conservative), while the
      ``expected`` power stands above the limit too (a spike of the logger where the plant
      could not have delivered that much does not count; without ``expected`` the rule is
      left out): one reading far above the plateau is as plain a sign as two just above it.

    A day that rose above the limit was not limited.

    References
    ----------
    Bonferroni 1936, Teoria statistica delle classi e calcolo delle probabilita (the union
    bound over a day's readings; from memory).
    """
    over = measured / level - 1
    two = (over > tol_p).groupby(days).sum() >= 2
    if expected is None:
        return two
    n = measured.notna().groupby(days).sum().clip(lower=1)
    sigma = tol_p / NormalDist().inv_cdf(1 - alpha / 2)
    bound = pd.Series(stats.norm.isf(alpha / (2 * n.to_numpy())) * sigma, index=n.index)
    far = over.where(expected > level).groupby(days).max() > bound
    return two | far


def days_at(measured: pd.Series, expected: pd.Series, days: np.ndarray, level: float,
            tol: float, tol_p: float) -> pd.Series:
    """Per day: evidence of a limit at ``level`` [W]: at least two intervals within ``tol_p``
    of it while the expected power stands above it by ``tol``, the measured power flat over
    them while the expected power moves (:func:`held_flat`)."""
    at = ((measured / level - 1).abs() <= tol_p) & (expected >= level * (1 + tol))
    return (at.groupby(days).sum() >= 2) & held_flat(measured, expected, at, days)


def _derate_runs(limit: pd.Series, above: Callable[[float], pd.Series], tol: float
                 ) -> list[tuple[pd.Timestamp, pd.Timestamp, float]]:
    """(first day, last day, limit [W]) of each run of held days at one limit (within
    2 ``tol``) with no day between on which the inverter rose above it (``above(level)``:
    :func:`days_above`; a day held lower is consistent with the limit and neither joins nor
    breaks the run); runs of one held day are left out."""
    out = []
    held = limit.dropna()
    done = np.zeros(len(held), dtype=bool)
    for k in range(len(held)):
        if done[k]:
            continue
        lv, last, members = float(held.iloc[k]), held.index[k], [k]
        up = above(lv)
        for j in range(k + 1, len(held)):
            nxt = held.index[j]
            if up[(up.index > last) & (up.index < nxt)].any() or held.iloc[j] > lv * (1 + 2 * tol):
                break
            if held.iloc[j] >= lv * (1 - 2 * tol):
                members.append(j)
                last = nxt
        done[members] = True
        if len(members) >= 2:
            out.append((held.index[members[0]], last,
                        float(np.median(held.iloc[members]))))
    return out


class Window(NamedTuple):
    """A derate's days: the first and last, the day above the limit before and after (None
    where there is none) and the expected error of each edge [d] (NaN without a day above
    the limit on that side: the edge is then bounded by the data, not by evidence)."""

    first: pd.Timestamp
    last: pd.Timestamp
    before: pd.Timestamp | None
    after: pd.Timestamp | None
    first_error_d: float
    last_error_d: float


def plateau_log_lr(measured: pd.Series, expected: pd.Series, days: np.ndarray,
                   level: float | np.ndarray, tol_p: float, alpha: float) -> pd.Series:
    """Per day: the log likelihood ratio of its readings under a limit at ``level`` [W] (one
    for all, or one per reading) against none (0 where no reading lies on the plateau).

    A limit censors the power: what would have been above it is read at it, what is below
    it reads the same either way, so only the readings on the plateau (within ``tol_p`` of
    it) tell the two apart (readings above it are the days above, :func:`days_above`). The
    power the inverter would deliver unlimited is the expected power times the day's ratio,
    log-normal about the median log ratio of its readings that no limit can touch (expected
    power below it, at least three), with their robust spread (1.4826 MAD, Hampel 1974), at
    least the plateau's own noise (``tol_p`` over the normal quantile at ``alpha``). A
    reading on the plateau has probability P(unlimited > level) under the limit and the
    unlimited density there times the plateau's width 2 ``tol_p`` without (a censored normal
    model, Tobin 1958, Econometrica 26:24, from memory)."""
    m, e = measured.to_numpy(dtype=float), expected.to_numpy(dtype=float)
    lv = np.broadcast_to(np.asarray(level, dtype=float), m.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        on = (np.abs(m / lv - 1) <= tol_p) & (e > 0)
        free = (e > 0) & (e < lv) & (m > 0)
        log_ratio = np.log(m / e)
    floor = tol_p / NormalDist().inv_cdf(1 - alpha / 2)
    unique, which = np.unique(days, return_inverse=True)
    out = np.zeros(len(unique))
    rows = np.split(np.argsort(which, kind="stable"), np.cumsum(np.bincount(which))[:-1])
    for j in np.unique(which[on]):
        today = rows[j]
        x = log_ratio[today[free[today]]]
        if len(x) < 3:
            continue
        mid = float(np.median(x))
        spread = max(1.4826 * float(np.median(np.abs(x - mid))), floor)
        held = today[on[today]]
        z = (np.log(lv[held]) - mid - np.log(e[held])) / spread
        out[j] = float(np.sum(_norm_logsf(z) - _norm_logpdf(z) + np.log(spread)
                              - np.log(2 * tol_p)))
    return pd.Series(out, index=pd.Index(unique))


# The standard normal's log survival function and log density, as scipy.stats.norm computes
# them (the same numbers), without its per-call argument handling (some 50 us a call, a call
# per day with a plateau)
def _norm_logsf(z: np.ndarray) -> np.ndarray:
    return special.log_ndtr(-z)


_LOG_SQRT_2PI = np.log(np.sqrt(2 * np.pi))


def _norm_logpdf(z: np.ndarray) -> np.ndarray:
    return -z**2 / 2.0 - _LOG_SQRT_2PI


def posterior_edge(log_lr: np.ndarray) -> tuple[int, float]:
    """The edge among candidates 0..n (0: the last day with evidence of the limit, k: the
    limit held on the k days after it too, whose log likelihood ratios are ``log_lr``,
    :func:`plateau_log_lr`) and its expected absolute error [d]: the posterior median (the
    lower one where two are) under a prior alike on every candidate, the estimate with the
    least expected absolute error (Laplace 1774, from memory), and the posterior mean distance
    from it. With no evidence on the days between, the median of n + 1 candidates alike, its
    expected error (n + 1)^2 // 4 / (n + 1)."""
    logw = np.r_[0.0, np.cumsum(log_lr)]
    wt = np.exp(logw - logw.max())
    cum = np.cumsum(wt)
    # the first candidate whose cumulative weight reaches half (the lower median where it
    # meets half exactly, rounding aside)
    k = int(np.searchsorted(cum, 0.5 * cum[-1] * (1 - 1e-12)))
    return k, float(np.sum(wt * np.abs(np.arange(len(wt)) - k)) / cum[-1])


def _widen(first: pd.Timestamp, last: pd.Timestamp, at: pd.Series, up: pd.Series,
           log_lr: pd.Series) -> Window:
    """A run's window widened to the farthest days on either side that show the limit
    (``at``: :func:`days_at`) before a day that rose above it (``up``: :func:`days_above`).

    Between the last day with evidence and the day above the limit, the days show little
    or nothing: one whose expected power never reaches the limit (cloud, low sun) nothing
    at all, one with a reading on the plateau a likelihood ratio (``log_lr``:
    :func:`plateau_log_lr`). The true boundary lies on any of them; the window ends at the
    posterior median, with its expected error (:func:`posterior_edge`; without evidence,
    midway). Without a day above the limit on that side the window ends on the last day
    with evidence."""
    order = at.index
    bounds: list[pd.Timestamp | None] = []
    errors: list[float] = []
    one = pd.Timedelta(days=1)
    for step, edge in ((-1, first), (1, last)):
        i, found = order.get_loc(edge) + step, None
        while 0 <= i < len(order):
            if up.get(order[i], False):
                found = order[i]
                break
            if at.iloc[i]:
                edge = order[i]
            i += step
        error = float("nan")
        if found is not None:
            gap = abs((found - edge) // one) - 1  # days between without evidence
            between = [edge + step * j * one for j in range(1, gap + 1)]
            k, error = posterior_edge(log_lr.reindex(between).fillna(0.0).to_numpy())
            edge = edge + step * k * one
        bounds += [edge, found]
        errors.append(error)
    return Window(bounds[0], bounds[2], bounds[1], bounds[3], *errors)


def derates(w: Wide, exclude: pd.DataFrame, tol: float, margin: float, alpha: float
            ) -> tuple[list[Event], pd.DataFrame]:
    """Derate events (kind ``clipping``) and the mask of their limited intervals (the energy
    here is the whole shortfall's; the ledger counts it against the inverter's local
    level, :mod:`perfcheck.detect.attribution`)."""
    mask = pd.DataFrame(False, index=w.index, columns=w.inverters)
    events: list[Event] = []
    limits = derated_days(w, exclude, tol, margin, alpha)
    step = w.interval_s.to_numpy()
    days = w.day.to_numpy()
    for inv in w.inverters:
        ms = w.measured[inv].where(~exclude[inv])
        tol_p = plateau_tolerance(ms, limits[inv], days, tol, alpha)
        above = partial(days_above, ms, days, tol_p=tol_p, alpha=alpha,
                        expected=w.expected[inv])
        for first, last, lv in _derate_runs(limits[inv], above, tol):
            win = _widen(first, last, days_at(ms, w.expected[inv], days, lv, tol, tol_p),
                         above(lv),
                         plateau_log_lr(ms, w.expected[inv], days, lv, tol_p, alpha))
            first, last = win.first, win.last
            inside = (days >= first) & (days <= last)
            m, e = w.measured[inv].to_numpy(), w.expected[inv].to_numpy()
            sel = inside & ~exclude[inv].to_numpy() & (np.abs(m - lv) <= tol * lv) & (e > lv)
            mask[inv] = mask[inv].to_numpy() | sel
            gap = float(np.nansum((e - m)[sel] * step[sel]) / 3.6e6)
            low, high = energy_band(gap, 0.05)
            n_held = int(limits[inv].loc[first:last].notna().sum())
            events.append(Event(
                kind="clipping", scope=scope_of(inv),
                start=pd.Timestamp(first).tz_localize(w.tz).tz_convert("UTC"),
                end=(pd.Timestamp(last) + pd.Timedelta(days=1)).tz_localize(w.tz)
                .tz_convert("UTC"),
                energy_loss_kwh=gap, energy_loss_kwh_low=max(0.0, low),
                energy_loss_kwh_high=high, method=METHOD_DERATE,
                evidence={"limit_w": lv, "rating_w": float(w.ac_w[inv]), "tolerance": tol,
                          "margin": margin, "plateau_tolerance": tol_p,
                          "held_days": n_held, "limited_intervals": int(sel.sum()),
                          **{f"day_above_limit_{k}": pd.Timestamp(d).date().isoformat()
                             for k, d in (("before", win.before), ("after", win.after))
                             if d is not None},
                          **{f"{k}_expected_error_d": e
                             for k, e in (("start", win.first_error_d),
                                          ("end", win.last_error_d)) if np.isfinite(e)}},
                detail={"cause": "inverter limited below its rating (derate)",
                        "limit_share_of_rating": lv / float(w.ac_w[inv])}))
    return events, mask


def detect(w: Wide, rel_sigma: float, step_noise: float, exclude: pd.DataFrame,
           spread: float = 0.0, alpha: float = 1e-3
           ) -> tuple[list[Event], pd.DataFrame, dict[int, pd.DataFrame]]:
    """Clipping events (one per inverter with clipping), the mask of clipped intervals, and
    per design event (by ``id``) the unlimited expected power above the rating [W].

    Parameters
    ----------
    rel_sigma : relative standard error of expected energy [-]
    step_noise : interval noise of measured/expected [-]
    exclude : intervals already explained (outages), left out
    spread : interval-level spread of measured/expected [-]; the derates' margin is three
        times it, at least 5 % (as the curtailment detector's)
    alpha : two-sided false-alarm probability of one reading against a held limit's plateau
        (:func:`plateau_tolerance`)
    """
    tol = max(3 * step_noise, 0.005)
    events, mask = derates(w, exclude, tol, max(3 * spread, 0.05), alpha)
    for ev in events:
        inv = ev.scope.split(":", 1)[1]
        inside = (w.index >= ev.start) & (w.index < ev.end)
        exclude = exclude.copy()
        exclude.loc[inside, inv] = True
    design: dict[int, pd.DataFrame] = {}
    step = w.interval_s.to_numpy()
    for inv in w.inverters:
        rating = float(w.ac_w[inv])
        m = w.measured[inv].to_numpy()
        pot = w.potential[inv].to_numpy()
        keep = ~exclude[inv].to_numpy() & np.isfinite(m)
        over = keep & (pot > rating * (1 + tol)) & (m > 0.5 * rating)
        if over.sum() < 3:
            continue
        limit = float(np.median(m[over]))
        clipped = keep & (pot > limit) & (np.abs(m - limit) <= tol * limit)
        n = int(clipped.sum())
        if n < 3:
            continue
        mask[inv] = mask[inv].to_numpy() | clipped
        # energy above the limit wherever the inverter was working (an interval only partly
        # clipped still loses its part above the limit)
        over_lim = keep & (pot > limit) & (m > 0.5 * limit)
        e_kwh = float(np.sum((pot[over_lim] - limit) * step[over_lim]) / 3.6e6)
        pot_kwh = float(np.sum(pot[over_lim] * step[over_lim]) / 3.6e6)
        low, high = energy_band(e_kwh, 0.0, rel_sigma * pot_kwh)
        derated = limit < rating * (1 - tol)
        gap = w.expected[inv].to_numpy() - m
        gap_kwh = float(np.nansum(gap[clipped] * step[clipped]) / 3.6e6)
        pos = np.flatnonzero(clipped)
        days = w.day.to_numpy()[clipped]
        ev = Event(
            kind="clipping" if derated else "design_clipping", scope=scope_of(inv),
            start=w.index[pos[0]],
            end=w.index[pos[-1]] + pd.Timedelta(seconds=float(step[pos[-1]])),
            energy_loss_kwh=e_kwh, energy_loss_kwh_low=max(low, 0.0), energy_loss_kwh_high=high,
            method=METHOD,
            evidence={"limit_w": limit, "rating_w": rating, "tolerance": tol,
                      "clipped_intervals": n, "clipped_hours": float(step[clipped].sum() / 3600),
                      "days_with_clipping": int(len(np.unique(days)))},
            detail={"shortfall_kwh": gap_kwh},
        )
        events.append(ev)
        if not derated:
            above = np.where(over_lim, pot - limit, 0.0)
            design[id(ev)] = pd.DataFrame({inv: above}, index=w.index)
    return events, mask, design
