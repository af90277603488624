"""The losses block: expected minus measured energy split by cause, with nothing counted twice.

Order of attribution (each step works on what the steps before it left):

1. ``clock_fault``: the change of the shortfall when the readings of a clock fault window are
   shifted back.
2. ``sensor_fault``: the expected energy minus the expected energy rebuilt from modelled POA
   in the sensor's suspect windows (the reference was wrong, not the plant; negative when the
   sensor read low).
3. Whole intervals, in this order, each interval to one cause only: ``outage``, ``clipping``
   (a limit below the rating), ``curtailment``: the whole shortfall of the interval.
4. Shares of the remaining intervals' expected power, one after another on what is left:
   ``degradation`` (beyond the site file's ageing allowance), ``soiling``, ``shading``,
   ``partial_outage``: loss = share x (expected less the losses of the causes before it).
5. ``underperformance``: in each period flagged by the baseline CUSUM, what steps 1-4 leave,
   when it is significant: above 3 times the daily relative model error (at least 1 %)
   times the period's expected energy (model errors taken as fully correlated over the
   period, conservative; one-sided false-alarm probability 0.13 % per flagged period).
6. ``unexplained_kwh``: the rest (noise and model error, either sign).

By construction expected_kwh - measured_kwh = sum(by_cause_kwh) + unexplained_kwh exactly
(summed over the intervals that have both a measured and an expected value).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd

from perfcheck.detect.baseline import Flagged
from perfcheck.detect.common import MODEL_FLOOR, Event, Footprint, Wide, energy_band, scope_of

Z_UNDER = 3.0  # one-sided 0.13 % per flagged period
MULTIPLICATIVE_ORDER = ("degradation", "soiling", "shading", "partial_outage")
EXCLUSIVE_ORDER = ("outage", "clipping", "curtailment")


def _kwh(x: np.ndarray, step: np.ndarray) -> float:
    return float(np.nansum(x * step[:, None]) / 3.6e6)


def losses(w0: Wide, w1: Wide, w2: Wide, exclusive: dict[str, pd.DataFrame],
           prints: list[Footprint], flagged: list[Flagged], rel_sigma: float
           ) -> tuple[dict[str, Any], list[Event]]:
    """The losses block and the ``underperformance`` events.

    ``w0`` as aligned, ``w1`` after the clock correction, ``w2`` after the sensor correction.
    """
    cols = w0.inverters
    step = w0.interval_s.to_numpy()
    both = (w0.measured.notna() & w0.expected.notna()).to_numpy()
    e0 = np.where(both, w0.expected.to_numpy(), 0.0)
    m0 = np.where(both, w0.measured.to_numpy(), 0.0)
    e1 = np.where(both, w1.expected.fillna(w0.expected).to_numpy(), 0.0)
    m1 = np.where(both, w1.measured.fillna(w0.measured).to_numpy(), 0.0)
    e2 = np.where(both, w2.expected.fillna(w1.expected).to_numpy(), 0.0)
    m2 = m1
    by: dict[str, float] = {}
    by["clock_fault"] = _kwh((e0 - m0) - (e1 - m1), step)
    by["sensor_fault"] = _kwh(e1 - e2, step)
    gap = e2 - m2
    taken = np.zeros_like(both)
    for kind in EXCLUSIVE_ORDER:
        if kind not in exclusive:
            continue
        mk = exclusive[kind].reindex(columns=cols).fillna(False).to_numpy(dtype=bool) & ~taken
        by[kind] = _kwh(np.where(mk, gap, 0.0), step)
        taken |= mk
    free = both & ~taken
    left = np.where(free, e2, 0.0)
    explained = np.zeros_like(left)
    col_pos = {c: i for i, c in enumerate(cols)}
    for kind in MULTIPLICATIVE_ORDER:
        total = 0.0
        for fp in (p for p in prints if p.event.kind == kind):
            ci = [col_pos[c] for c in fp.cols]
            sub = left[fp.lo:fp.hi][:, ci]
            loss = sub * fp.factor
            left[fp.lo:fp.hi, ci] = sub - loss
            explained[fp.lo:fp.hi, ci] += loss
            e = _kwh(loss, step[fp.lo:fp.hi])
            _restate(fp.event, e)
            total += e
        if total:
            by[kind] = total
    residual = np.where(free, gap - explained, 0.0)
    periods: list[dict] = []
    events = _underperformance(w0, residual, e2, flagged, rel_sigma, col_pos, step, by,
                               periods)
    expected_kwh = _kwh(e0, step)
    measured_kwh = _kwh(m0, step)
    by = {k: v for k, v in by.items() if v != 0.0}
    unexplained = (expected_kwh - measured_kwh) - math.fsum(by.values())
    block = {
        "expected_kwh": expected_kwh,
        "measured_kwh": measured_kwh,
        "by_cause_kwh": by,
        "unexplained_kwh": unexplained,
        "flagged_periods": periods,
        "order": ["clock_fault", "sensor_fault", *EXCLUSIVE_ORDER, *MULTIPLICATIVE_ORDER,
                  "underperformance", "unexplained"],
        "rule": "clock and sensor corrections first; then whole intervals (outage, clipping "
                "below the rating, curtailment); then shares of what is left (degradation "
                "beyond the allowance, soiling, shading, partial outage) one after another; "
                "the significant rest of each period flagged by the baseline test is "
                "underperformance; the remainder is unexplained",
    }
    return block, events


def _restate(ev: Event, attributed: float) -> None:
    """A share-type event reports the energy the attribution gave it (the band scaled alike),
    so events and the losses block agree; degradation keeps its own figure (against a plant
    that does not age) and records the attributed part beside it."""
    ev.detail["attributed_kwh"] = attributed
    if ev.kind == "degradation" or ev.energy_loss_kwh == 0:
        return
    k = attributed / ev.energy_loss_kwh
    ev.energy_loss_kwh = attributed
    ev.energy_loss_kwh_low *= k
    ev.energy_loss_kwh_high *= k


def _underperformance(w: Wide, residual: np.ndarray, expected: np.ndarray,
                      flagged: list[Flagged], rel_sigma: float, col_pos: dict[str, int],
                      step: np.ndarray, by: dict[str, float], record: list[dict]
                      ) -> list[Event]:
    days = w.day.to_numpy()
    out = []
    total = 0.0
    for f in flagged:
        j = col_pos[f.inverter]
        sel = (days >= np.datetime64(f.first_day)) & (days <= np.datetime64(f.last_day))
        u = float(np.sum(residual[sel, j] * step[sel]) / 3.6e6)
        # model errors persist over days (season, weather regime): the period's relative error
        # is taken as large as a single day's (fully correlated), a conservative bound
        sigma = max(rel_sigma, MODEL_FLOOR) * float(np.sum(expected[sel, j] * step[sel]) / 3.6e6)
        significant = bool(u > Z_UNDER * sigma and u > 0)
        record.append({"scope": scope_of(f.inverter), "first_day": f.first_day.date(),
                       "last_day": f.last_day.date(), "baseline_shortfall_kwh": f.shortfall_kwh,
                       "left_unexplained_kwh": u, "underperformance": significant})
        if not significant:
            continue
        total += u
        low, high = energy_band(u, 0.0, sigma)
        out.append(Event(
            kind="underperformance", scope=scope_of(f.inverter),
            start=pd.Timestamp(f.first_day).tz_localize(w.tz).tz_convert("UTC"),
            end=(pd.Timestamp(f.last_day) + pd.Timedelta(days=1)).tz_localize(w.tz)
            .tz_convert("UTC"),
            energy_loss_kwh=u, energy_loss_kwh_low=max(0.0, low), energy_loss_kwh_high=high,
            method="baseline regression residuals, lower CUSUM (Page 1954); what the detectors "
                   "do not explain",
            evidence={"test": "lower CUSUM of standardised daily residuals",
                      "cusum_min": f.cusum_min, "baseline_shortfall_kwh": f.shortfall_kwh,
                      "z": u / sigma if sigma > 0 else None},
            detail={"cause": "unknown"}))
    if total:
        by["underperformance"] = total
    return out
