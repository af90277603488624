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
not); the
same limit held on at least two days, with no day between on which the inverter rose above
it, is one derate, from the first held day to the end of the last (a setting that persists,
where a grid operator's order limits the plant on a day: common practice). A day on which
every sibling stood below its expected power by the margin while this inverter was held is
left to the curtailment detector (a shared set-point). The design clipping is then estimated
outside the derates.

References
----------
Perry, Muller & Anderson 2021, "Performance comparison of clipping detection techniques in AC
power time series", IEEE PVSC 48 (NREL/CP-5K00-78954): plateau detection on AC power; the
threshold form used here is common practice.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perfcheck.detect.common import Event, Wide, energy_band, scope_of

METHOD = ("plateau at the inverter's AC limit while unlimited expected power exceeds it "
          "(in the spirit of Perry, Muller & Anderson 2021)")


METHOD_DERATE = ("daily ceiling held flat below the AC rating while the expected power exceeds it, "
                 "the same limit on consecutive days (plateau test, common practice)")


def derated_days(w: Wide, exclude: pd.DataFrame, tol: float, margin: float,
                 min_minutes: float = 30.0) -> pd.DataFrame:
    """Per site-local day and inverter: the power limit held that day [W] (NaN: none).

    Held: at least ``min_minutes`` of intervals within ``tol`` of the day's highest power,
    that power below the rating by more than ``tol`` and above a tenth of it, and the
    expected power above it by ``margin`` on those intervals."""
    m = w.measured.where(~exclude)
    days = w.day.to_numpy()
    top = m.groupby(days).transform("max")
    held = ((m - top).abs() <= tol * top) & w.expected.ge(top * (1 + margin))
    minutes = held.mul(w.interval_s.to_numpy() / 60, axis=0).groupby(days).sum()
    ceiling = m.groupby(days).max()
    # a limit holds the power while the expected power moves (at a broad noon peak the
    # power follows the expected curve): over the held intervals the measured power's range
    # at most half the expected power's, relative to their means
    def rel_range(f: pd.DataFrame) -> pd.DataFrame:
        g = f.where(held).groupby(days)
        return (g.max() - g.min()) / g.mean()

    moves = rel_range(w.measured) <= 0.5 * rel_range(w.expected)
    ok = (minutes >= min_minutes) & moves & ceiling.lt(w.ac_w * (1 - tol), axis=1) & ceiling.gt(
        w.ac_w * 0.1, axis=1)
    if len(w.inverters) > 1:
        # a shared set-point: while this inverter is held, every sibling is below its
        # expected power by the margin too (the curtailment detector's case)
        ratio = w.measured / w.expected.where(w.expected > 0)
        for inv in w.inverters:
            sib = ratio.drop(columns=inv).where(held[inv], axis=0)
            below = sib.groupby(days).median().le(1 - margin)
            ok[inv] &= ~below.all(axis=1)
    return ceiling.where(ok)


def _derate_runs(limit: pd.Series, ceiling: pd.Series, tol: float
                 ) -> list[tuple[pd.Timestamp, pd.Timestamp, float]]:
    """(first day, last day, limit [W]) of each run of held days at one limit (within
    2 ``tol``) with no day between whose highest power rose above it (a day held lower is
    consistent with the limit and neither joins nor breaks the run); runs of one held day
    are left out."""
    out = []
    held = limit.dropna()
    done = np.zeros(len(held), dtype=bool)
    for k in range(len(held)):
        if done[k]:
            continue
        lv, last, members = float(held.iloc[k]), held.index[k], [k]
        for j in range(k + 1, len(held)):
            nxt = held.index[j]
            between = ceiling[(ceiling.index > last) & (ceiling.index < nxt)]
            if (between > lv * (1 + 2 * tol)).any() or held.iloc[j] > lv * (1 + 2 * tol):
                break
            if held.iloc[j] >= lv * (1 - 2 * tol):
                members.append(j)
                last = nxt
        done[members] = True
        if len(members) >= 2:
            out.append((held.index[members[0]], last,
                        float(np.median(held.iloc[members]))))
    return out


def derates(w: Wide, exclude: pd.DataFrame, tol: float, margin: float
            ) -> tuple[list[Event], pd.DataFrame]:
    """Derate events (kind ``clipping``) and the mask of their limited intervals (the energy
    here is the whole shortfall's; the ledger counts it against the inverter's local
    level, :mod:`perfcheck.detect.attribution`)."""
    mask = pd.DataFrame(False, index=w.index, columns=w.inverters)
    events: list[Event] = []
    limits = derated_days(w, exclude, tol, margin)
    ceilings = w.measured.where(~exclude).groupby(w.day.to_numpy()).max()
    step = w.interval_s.to_numpy()
    days = w.day.to_numpy()
    for inv in w.inverters:
        for first, last, lv in _derate_runs(limits[inv], ceilings[inv], tol):
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
                          "margin": margin, "held_days": n_held,
                          "limited_intervals": int(sel.sum())},
                detail={"cause": "inverter limited below its rating (derate)",
                        "limit_share_of_rating": lv / float(w.ac_w[inv])}))
    return events, mask


def detect(w: Wide, rel_sigma: float, step_noise: float, exclude: pd.DataFrame,
           spread: float = 0.0) -> tuple[list[Event], pd.DataFrame, dict[int, pd.DataFrame]]:
    """Clipping events (one per inverter with clipping), the mask of clipped intervals, and
    per design event (by ``id``) the unlimited expected power above the rating [W].

    Parameters
    ----------
    rel_sigma : relative standard error of expected energy [-]
    step_noise : interval noise of measured/expected [-]
    exclude : intervals already explained (outages), left out
    spread : interval-level spread of measured/expected [-]; the derates' margin is three
        times it, at least 5 % (as the curtailment detector's)
    """
    tol = max(3 * step_noise, 0.005)
    events, mask = derates(w, exclude, tol, max(3 * spread, 0.05))
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
