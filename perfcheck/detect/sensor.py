"""Irradiance sensor faults: the plane-of-array sensor drifting, reading off, or stuck.

* Level: the daily ratio of the sensor's irradiation to the clear-sky irradiance in its plane
  (:func:`perfcheck.detect.common.clearsky_poa`) on clear days, log-transformed, segmented by
  circular binary segmentation (:func:`perfcheck.detect.common.change_points`). A segment
  whose level differs from the reference level (the longest segment) by a Welch t-test
  p-value below ``alpha`` and by at least ``min_shift``, with a step at each of its inner
  edges (half the change or more, medians of three clear days either side), is suspect; its
  edges are then placed on the day using every day's ratio of the sensor-fed inverters'
  performance index to the other inverters' (else the sensor against the POA modelled from
  GHI). It must be confirmed
  by the inverters fed by the sensor: when the sensor moved, all of them move together the
  other way against their expected power, by half to twice the sensor's change, compared
  with as many days on either side (the clear-sky reference has seasonal errors of a few %
  that the power does not mirror).
* Stuck: the same non-zero value (or zero while the reference shows daylight) for at least
  ``min_stuck_minutes`` in a row. Measured irradiance changes from one interval to the next
  (noise, sun motion), so an identical run of that length does not occur by chance.

When the sensor is suspect, :func:`corrected` rebuilds the expected power of the inverters that
used the sensor in those windows from the reference (the window's mean ratio for a level
fault, the interval ratio for a stuck sensor), so the metrics of that window fall back to
modelled POA; ``suspect_windows`` gives the windows to other stages.
``min_shift`` 2 %: about the daily uncertainty of a class A pyranometer (IEC 61724-1), from
memory; ``alpha`` 1e-3.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np
import pandas as pd

from perfcheck.detect.common import Event, Wide, change_points, daily_pi, daylight, despike, runs
from perfcheck.lazy import lazy_module

stats = lazy_module("scipy.stats")

METHOD = ("POA sensor against modelled POA on clear days: circular binary segmentation and "
          "Welch t test (Olshen et al. 2004); identical-value runs for stuck readings")


@dataclasses.dataclass(frozen=True)
class Suspect:
    start: pd.Timestamp  # UTC, inclusive
    end: pd.Timestamp  # UTC, exclusive
    mode: str  # 'level' or 'stuck'
    factor: float  # sensor / reference over the window (level), nan for stuck
    evidence: dict[str, Any]


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
    if len(q) < 4 * min_days:
        return []
    x = despike(q.to_numpy())
    segs = change_points(x, alpha=alpha, min_size=min_days)
    ref = max(segs, key=lambda g: g.stop - g.start)
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


def _edges(x: np.ndarray, start: int, stop: int, k: int) -> list[float]:
    """Log change across each inner edge of x[start:stop] (medians of k values each side)."""
    out = []
    if start > 0:
        out.append(float(np.median(x[start:start + k]) - np.median(x[max(0, start - k):start])))
    if stop < len(x):
        out.append(float(np.median(x[max(start, stop - k):stop]) - np.median(x[stop:stop + k])))
    return out


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
    for a, b in runs(same):
        minutes = step[a:b].sum() / 60
        if minutes < min_stuck_minutes:
            continue
        out.append(Suspect(start=w.index[a], end=w.index[b - 1] + pd.Timedelta(
            seconds=float(step[b - 1])), mode="stuck", factor=float("nan"),
            evidence={"test": "identical consecutive readings", "value_wm2": float(v[a]),
                      "minutes": float(minutes)}))
    return out


def sensor_series(w: Wide) -> pd.Series | None:
    """The POA sensor's reading as seen in the aligned rows (None without a sensor)."""
    cols = sensor_columns(w)
    if not cols:
        return None
    return w.poa[cols[0]].where(w.from_sensor[cols[0]])


def find(w: Wide, clear: pd.Series, sensor_clear: pd.Series, alpha: float = 1e-3
         ) -> list[Suspect]:
    """All suspect windows of the POA sensor (empty when no inverter uses a sensor).

    ``sensor_clear`` is the clear-sky irradiance in the sensor's plane [W/m^2].
    """
    cols = sensor_columns(w)
    sensor = sensor_series(w)
    if sensor is None:
        return []
    stuck = stuck_faults(w, sensor, sensor_clear)
    free = sensor.copy()
    for s in stuck:  # the level test ignores the days touched by a stuck run
        days = w.day[(w.index >= s.start) & (w.index < s.end)].unique()
        free[w.day.isin(days).to_numpy()] = np.nan
    others = [c for c in w.inverters if c not in cols]
    if others:
        # the sensor-fed inverters against the others, every day: a sensor fault moves the
        # first ones' expected power only (their ratio to it jumps, the others' stays)
        pi = np.log(daily_pi(w, daylight(w)))
        every_day = pi[cols].median(axis=1) - pi[others].median(axis=1)
    elif w.ghi.notna().sum() > 0.5 * (w.zenith < 80).sum():
        every_day = _daily_log_ratio(w, free, w.poa_modelled[cols[0]])
    else:
        every_day = _daily_log_ratio(w, free, sensor_clear)
    levels = level_faults(w, free, sensor_clear, clear, every_day, alpha=alpha)
    # cross-check: the inverters fed by the sensor move together against their expected power
    # (by about the sensor's change, the other way); a level change that the power does not
    # mirror is the reference's seasonal error, not the sensor
    pi_fed = np.log(daily_pi(w, daylight(w))[cols]).median(axis=1)
    found = [s for s in levels if _mirrored(pi_fed, s, w.tz)] + stuck
    ratio = (w.measured / w.expected).where(w.expected.gt(w.ac_w * 0.1, axis=1))
    out = []
    for s in found:
        inside = (w.index >= s.start) & (w.index < s.end)
        moves = {}
        for c in w.inverters:
            a, b = np.nanmedian(ratio[c][inside]), np.nanmedian(ratio[c][~inside])
            moves[c] = float(100 * (a / b - 1)) if np.isfinite(a) and b else None
        ev = {**s.evidence, "inverters_on_sensor": cols,
              "ratio_to_expected_change_pct": moves}
        out.append(dataclasses.replace(s, evidence=ev))
    return out


def _mirrored(pi_fed: pd.Series, s: Suspect, tz: Any) -> bool:
    """The sensor-fed inverters' daily index moves against the sensor's change in the window,
    by at least half of it, compared with as many days on either side."""
    d0 = s.start.tz_convert(tz).tz_localize(None).normalize()
    d1 = s.end.tz_convert(tz).tz_localize(None).normalize()
    span = d1 - d0
    x = pi_fed.dropna()
    inside = x[(x.index >= d0) & (x.index < d1)]
    around = x[((x.index >= d0 - span) & (x.index < d0)) | ((x.index >= d1) &
                                                            (x.index < d1 + span))]
    if len(inside) < 3 or len(around) < 3:
        return False
    move = float(inside.median() - around.median())
    want = -float(np.log(s.factor))
    s.evidence["fed_inverters_index_change_pct"] = 100 * (np.exp(move) - 1)
    return bool(np.sign(move) == np.sign(want) and 0.5 * abs(want) <= abs(move) <= 2 * abs(want))


def corrected(w: Wide, suspects: list[Suspect]) -> Wide:
    """The series with the expected power of the sensor-fed inverters taken, inside the
    suspect windows, from the model stage's series built on modelled POA alone (its own cell
    temperature, part-load efficiency and limits), and their irradiance from the modelled
    POA."""
    if not suspects:
        return w
    exp, pot, poa = w.expected.copy(), w.potential.copy(), w.poa.copy()
    for s in suspects:
        inside = (w.index >= s.start) & (w.index < s.end)
        for c in w.inverters:
            use = inside & w.from_sensor[c].to_numpy()
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
        out.append(Event(kind="sensor_fault", scope="plant", start=s.start, end=s.end,
                         energy_loss_kwh=0.0, energy_loss_kwh_low=0.0, energy_loss_kwh_high=0.0,
                         method=METHOD, evidence=s.evidence,
                         detail={"mode": s.mode, "note": note,
                                 "fallback": "expected power of the sensor-fed inverters "
                                             "rebuilt from modelled POA in this window",
                                 "expected_correction_kwh": -corr}))
    return out


def suspect_windows(aligned: pd.DataFrame, site: Any) -> list[dict[str, Any]]:
    """Windows where the POA sensor is suspect, for other stages (metrics fall back to
    modelled POA there): ``[{"start", "end" (UTC, end exclusive), "mode", "factor"}]``."""
    from perfcheck.detect.common import clear_days, clearsky_poa, wide
    from perfcheck.model import sensor_plane

    w = wide(aligned, {i.id: i.ac_kw * 1000 for i in site.inverters},
             None if site.export_limit_kw is None else site.export_limit_kw * 1000, site.tz)
    tilt, az = sensor_plane(site)
    cs = clearsky_poa(w, site.latitude_deg, site.longitude_deg, site.altitude_m,
                      {"sensor": [(tilt, az, 1.0)]})["sensor"]
    return [{"start": s.start, "end": s.end, "mode": s.mode, "factor": s.factor}
            for s in find(w, clear_days(w), cs)]
