"""Outages: an inverter at (or near) zero while the sun is up and its siblings produce, and
plant-wide stops with irradiance present.

An interval is *judged* when the model expects at least ``min_expected_share`` of the
inverter's AC rating (there is enough light that a working inverter would clearly produce) and
the sun stands at least ``min_elevation_deg`` (10 deg) high: lower, at air mass above about 5.6
(Kasten & Young 1989), the model's spectral, incidence-angle and low-light terms are
extrapolated (the SAPM spectral polynomial of King et al. 2004, SAND2004-3535, was fitted on
air masses up to about 5 and some modules' fall to zero near sunrise; from memory), and a
healthy plant may produce nothing while the model expects a tenth of its rating (common
practice, as in the sun-elevation filters of performance-ratio analyses).
A judged interval is *out* when the measured power is below ``near_zero`` of the expected
power and the inverter produced nothing (under 1 % of its rating); with normal operation at a
ratio near 1 (spread a few %), a ratio under 0.05 is many standard deviations away, so a false
alarm from noise is practically impossible. An inverter that delivers more than that while
under ``near_zero`` of the expected power runs with its modules turned from the sun (a
stalled or stowed tracker in low sun sees the diffuse light alone) or some other cause the
model does not know: not an outage, and the interval is not judged. A run of out
intervals may bridge the night and unjudged low-light intervals, never a producing one, and
is widened to the neighbouring low-light intervals where the inverter produced nothing, so
start and end sit on the interval; an inverter's run is widened over the night to a whole
dim day next to it (no interval of it judged producing) on which it produced nothing while a
sibling produced at least ``near_zero`` of its expected energy (the same test, on the day). A
whole day on which an inverter produced nothing while a sibling delivered at least half its
expected energy (``SIBLING_LIT``: the light was there) is out however low the sun stood: its
intervals where the model expects at least 5 % of the rating (the detectors' daylight) are
judged out, as on a winter day at a high latitude where the model never expects a tenth of the
rating. Runs shorter than ``min_minutes`` are ignored.
These limits are common practice (no published source). A plant of one inverter reports its
stops on that inverter (the device that stopped). The energy and its band here are the
whole shortfall's; the ledger counts it against the inverter's local level
(:mod:`perfcheck.detect.attribution`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perfcheck.detect.common import Event, Wide, daylight, energy_band, runs, scope_of

METHOD = ("interval state: measured/expected below 5 % and measured below 1 % of rating, with "
          "at least 10 % of rating expected and the sun above 10 deg, or a whole day without "
          "output while a sibling delivered half its expected energy; siblings producing "
          "(inverter) or all stopped (plant); common practice")
# a sibling that delivered at least this share of its expected energy on a day shows the light
# was there (common practice)
SIBLING_LIT = 0.5


def states(w: Wide, min_expected_share: float = 0.10, near_zero: float = 0.05,
           min_elevation_deg: float = 10.0) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per interval and inverter: 1 out, 0 producing, -1 not judged; and 'produced nothing'.

    Returns ``(state, nothing)``; ``nothing`` marks intervals with expected > 0 where the
    inverter's measured power is below 1 % of its rating (an out interval is one of them;
    used to widen a run too).
    """
    e, m = w.expected, w.measured
    high = (w.zenith <= 90.0 - min_elevation_deg).to_numpy()[:, None]
    judged = e.ge(w.ac_w * min_expected_share, axis=1) & m.notna() & high
    ratio = m / e
    nothing = (e > 0) & m.le(w.ac_w * 0.01, axis=1)
    state = pd.DataFrame(-1, index=e.index, columns=e.columns, dtype=np.int8)
    state = state.mask(judged & (ratio >= near_zero), 0).mask(
        judged & (ratio < near_zero) & nothing, 1)
    return state, nothing


def silent_days(w: Wide, state: pd.DataFrame, nothing: pd.DataFrame, sibling_share: float = 0.05
                ) -> pd.DataFrame:
    """Per interval and inverter: its day is one on which the inverter produced nothing on
    every interval with expected power, none was judged producing, and a sibling delivered at
    least ``sibling_share`` of its expected energy (an inverter alone: never)."""
    days = w.day.to_numpy()
    lit = w.expected.gt(0)
    dark = (nothing | ~lit).groupby(days).all() & lit.groupby(days).any() & (
        state.ne(0).groupby(days).all())
    ratio = (w.measured.where(lit).groupby(days).sum(min_count=1)
             / w.expected.where(lit & w.measured.notna()).groupby(days).sum(min_count=1))
    out = pd.DataFrame(False, index=dark.index, columns=dark.columns)
    for inv in w.inverters:
        others = ratio.drop(columns=inv)
        if others.shape[1]:
            out[inv] = dark[inv] & others.ge(sibling_share).any(axis=1)
    return out.reindex(days).set_axis(w.index)


def _whole_days(lo: int, hi: int, silent: np.ndarray, lit: np.ndarray, day: np.ndarray
                ) -> tuple[int, int]:
    """``[lo, hi)`` widened over the night to the silent days (``silent``) next to it, day by
    day: to their first and last interval with expected power (``lit``); ``day`` numbers the
    rows' days."""
    def first_lit(j: int, step: int) -> int:
        while 0 <= j < len(lit) and not lit[j]:
            j += step
        return j

    while True:
        j = first_lit(lo - 1, -1)
        if j < 0 or not silent[j]:
            break
        on = np.flatnonzero(lit & (day == day[j]))
        lo = int(on[0])
    while True:
        j = first_lit(hi, 1)
        if j >= len(lit) or not silent[j]:
            break
        on = np.flatnonzero(lit & (day == day[j]))
        hi = int(on[-1]) + 1
    return lo, hi


def _events_for(state: np.ndarray, nothing: np.ndarray, w: Wide, col: list[str],
                scope: str, min_minutes: float, rel_sigma: float,
                silent: np.ndarray | None = None) -> tuple[list[Event], np.ndarray]:
    """Runs of state 1 (bridging -1) to events; the mask of the intervals they cover
    (widened over ``silent`` days, :func:`silent_days`, when given)."""
    pos = np.flatnonzero(state >= 0)
    mask = np.zeros(len(state), dtype=bool)
    events: list[Event] = []
    step = w.interval_s.to_numpy()
    for a, b in runs(state[pos] == 1):
        lo, hi = pos[a], pos[b - 1] + 1
        out_minutes = step[pos[a:b]].sum() / 60
        if out_minutes < min_minutes:
            continue
        while lo > 0 and state[lo - 1] != 0 and nothing[lo - 1]:
            lo -= 1
        while hi < len(state) and state[hi] != 0 and nothing[hi]:
            hi += 1
        if silent is not None:
            lo, hi = _whole_days(lo, hi, silent, w.expected[col[0]].to_numpy() > 0,
                                 pd.factorize(w.day)[0])
        mask[lo:hi] = True
        sl = slice(lo, hi)
        gap = (w.expected.iloc[sl][col].to_numpy() - w.measured.iloc[sl][col].to_numpy())
        energy = float(np.nansum(gap * step[sl, None]) / 3.6e6)
        low, high = energy_band(energy, rel_sigma)
        events.append(Event(
            kind="outage", scope=scope, start=w.index[lo],
            end=w.index[hi - 1] + pd.Timedelta(seconds=float(step[hi - 1])),
            energy_loss_kwh=energy, energy_loss_kwh_low=max(low, 0.0),
            energy_loss_kwh_high=high, method=METHOD,
            evidence={"judged_out_intervals": int(b - a), "out_minutes": float(out_minutes),
                      "inverters": col},
        ))
    return events, mask


def reported_state(reported: pd.DataFrame | None, devices: list[str], start: pd.Timestamp,
                   end: pd.Timestamp) -> str | None:
    """What the devices' status channels said during [start, end): the state reported most
    often other than "running" (of equals, the first one read), "running" when that is all
    they said, None without a status reading in the window.

    ``reported``: ts (UTC), device, state (:func:`perfcheck.status.reported`).
    """
    if reported is None or reported.empty:
        return None
    inside = reported[reported["device"].isin(devices) & (reported["ts"] >= start)
                      & (reported["ts"] < end)]
    if inside.empty:
        return None
    other = inside.loc[inside["state"] != "running", "state"]
    if other.empty:
        return "running"
    counts = other.value_counts(sort=False)
    return str(counts.index[counts.to_numpy().argmax()])


def detect(w: Wide, rel_sigma: float, min_minutes: float = 15.0,
           reported: pd.DataFrame | None = None, **kw: float) -> tuple[list[Event], pd.DataFrame]:
    """Outage events and the (interval x inverter) mask of the intervals they cover.

    Parameters
    ----------
    w : the aligned series
    rel_sigma : relative standard error of the expected energy [-], for the energy band
    min_minutes : shortest outage reported [min]
    reported : the status channels' states (ts, device, state), if the loggers write them:
        an outage during which they reported a state carries it as ``detail["reported_state"]``
    """
    state, nothing = states(w, **kw)
    st, no = state.to_numpy(), nothing.to_numpy()
    ids = w.inverters
    mask = pd.DataFrame(False, index=w.index, columns=ids)
    events: list[Event] = []
    # plant-wide: every judged inverter out, with at least two judged (one inverter alone
    # cannot tell a plant stop from its own)
    judged = st >= 0
    need = min(2, len(ids))
    all_out = (judged.sum(axis=1) >= need) & ((st == 1) | ~judged).all(axis=1)
    any_prod = (st == 0).any(axis=1)
    plant_state = np.where(all_out, 1, np.where(any_prod, 0, -1)).astype(np.int8)
    ev, pm = _events_for(plant_state, no.all(axis=1), w, ids,
                         "plant" if len(ids) > 1 else scope_of(ids[0]), min_minutes, rel_sigma)
    events += ev
    mask.loc[pm, :] = True
    if len(ids) > 1:
        quiet = silent_days(w, state, nothing, kw.get("near_zero", 0.05)).to_numpy()
        off = silent_days(w, state, nothing, SIBLING_LIT).to_numpy() & no & daylight(w).to_numpy()
        for j, inv in enumerate(ids):
            s = st[:, j].copy()
            s[off[:, j] & (s == -1)] = 1  # a silent day in the light: out however low the sun
            s[pm & (s == 1)] = -1  # already part of a plant stop
            ev, im = _events_for(s, no[:, j], w, [inv], scope_of(inv), min_minutes, rel_sigma,
                                 quiet[:, j] & ~pm)
            events += ev
            mask.loc[im, inv] = True
    for e in events:
        whole = e.scope == "plant" or len(ids) == 1
        devices = e.evidence["inverters"] + (["plant"] if whole else [])
        state = reported_state(reported, devices, e.start, e.end)
        if state is not None:
            e.detail["reported_state"] = state
    return events, mask
