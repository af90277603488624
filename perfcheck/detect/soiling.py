"""Soiling: a gradual decline of the daily performance index between recoveries.

The plant's daily performance index is the median over the inverters of each inverter's
insolation-weighted daily measured/expected, divided by its own median (so inverters of other
orientation or size count alike and one inverter's own fault does not move it). Recoveries are
(a) days on which some 24-hour rain total reaches ``rain_mm`` in the readings and (b)
significant local steps up of the index (:func:`local_steps_up`); a step up with at least 1 mm
of rain on that day or the day before is a rain recovery, else a cleaning. Between two
recoveries the index is fitted by a Theil-Sen line; an interval whose slope is negative with
Kendall's test p-value below ``alpha``, ended by a recovery that gives back at least half of
its decline (:func:`_restored`), is a soiling interval; the interval still open at the end of
the data counts when it declines like the confirmed ones (:func:`_like`). Soiling may start
some days after the recovery (a grace period, as in Kimber et al. 2006): the onset is the hinge
of the weighted least-squares fit of a level followed by a linear decline. Its soiling ratio is
that fit over the clean level: the plateau before the onset where there is one, else the
rolling median of the index outside the soiling intervals where that is above the line's start
(a partial recovery), else the line's start (a full recovery). Consecutive soiling intervals
form one soiling episode (one event) with its recoveries.

The false-alarm probability per interval tested is ``alpha`` (Kendall's test, one-sided
decline; the run passes 1e-3), and per series ``alpha`` for the steps up (Bonferroni over
the days). ``rain_mm`` default 5 mm in 24 hours: common practice (Kimber et al. 2006 use a
rain threshold of this order; no single source).

References
----------
Deceglie, Micheli & Muller 2018, "Quantifying soiling loss directly from PV yield", IEEE J.
Photovolt. 8(2):547: the stochastic rate and recovery method (insolation-weighted daily index,
recoveries from rain and from jumps, Theil-Sen rates per interval) (from memory); Kimber,
Mitchell, Nogradi & Wenger 2006, IEEE 4th WCPEC, the rain-reset soiling model.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perfcheck.detect.common import (
    Event,
    Footprint,
    Wide,
    energy_band,
    mann_kendall_slope,
    robust_sigma,
)
from perfcheck.lazy import lazy_module

stats = lazy_module("scipy.stats")

METHOD = ("Theil-Sen decline of the daily performance index between recoveries (rain, "
          "detected steps up), in the spirit of Deceglie, Micheli & Muller 2018")


def plant_index(pi: pd.DataFrame) -> pd.Series:
    """Median over inverters of each inverter's daily index divided by its own median."""
    return (pi / pi.median()).median(axis=1, skipna=True)


def local_steps_up(index: pd.Series, alpha: float, k: int = 3) -> list[tuple[pd.Timestamp, float]]:
    """Days where the index steps up: the median of the ``k`` values from that day on exceeds
    the median of the ``k`` values before it by more than the one-sided normal quantile of
    ``alpha / n`` (Bonferroni over the n days) times the difference's standard error
    (1.2533 sigma sqrt(2 / k) for medians of k values, sigma from
    :func:`perfcheck.detect.common.robust_sigma`). Local maxima only; (day, relative step)."""
    s = index.dropna()
    x = np.log(s.to_numpy())
    n = len(x)
    if n < 2 * k + 1:
        return []
    sigma = robust_sigma(x)
    if not sigma > 0:
        return []
    win = np.lib.stride_tricks.sliding_window_view(x, k)
    med = np.median(win, axis=1)  # med[i] = median of x[i:i+k]
    i = np.arange(k, n - k + 1)
    delta = med[i] - med[i - k]
    z = delta / (1.2533 * sigma * np.sqrt(2.0 / k))
    crit = stats.norm.isf(alpha / n)
    out = []
    for j in np.flatnonzero(z > crit):
        lo, hi = max(0, j - k), min(len(z), j + k + 1)
        if z[j] == z[lo:hi].max():
            out.append((s.index[i[j]], float(np.exp(delta[j]) - 1)))
    return out


def recoveries(index: pd.Series, rain_daily: pd.Series, rain_mm: float, alpha: float,
               min_days: int = 3) -> list[dict]:
    """Recovery days (the first day of the recovered level), with cause and step size."""
    s = index.dropna()
    out: dict[pd.Timestamp, dict] = {}
    rain = rain_daily.reindex(index.index).fillna(0.0)
    for day in rain.index[rain >= rain_mm]:
        nxt = day + pd.Timedelta(days=1)
        out[nxt] = {"day": nxt, "cause": "rain", "rain_mm": float(rain.loc[day]),
                    "detected_step": None}
    for day, step in local_steps_up(s, alpha, min_days):
        wet = float(rain.reindex([day - pd.Timedelta(days=1), day]).fillna(0).max())
        near = [d for d in out if abs((d - day).days) <= 1]
        if near:
            out[near[0]]["detected_step"] = step
            continue
        cause = "rain" if wet >= 1.0 else "cleaning"
        out[day] = {"day": day, "cause": cause, "rain_mm": wet, "detected_step": step}
    merged: list[dict] = []
    for d in sorted(out):  # one recovery per wet spell: days in a row count once
        if merged and (d - merged[-1]["day"]).days <= 1:
            if merged[-1]["detected_step"] is None:
                merged[-1]["detected_step"] = out[d]["detected_step"]
            continue
        merged.append(out[d])
    return merged


def detect(w: Wide, pi: pd.DataFrame, rel_sigma: float, rain_mm: float = 5.0,
           alpha: float = 0.01, min_days: int = 5) -> tuple[list[Event], list[Footprint],
                                                            pd.Series]:
    """Soiling episodes, their footprints, and the daily soiling ratio (1 where clean)."""
    idx = plant_index(pi)
    days = pd.DatetimeIndex(idx.index)
    # rain: the largest 24-hour total ending within the day
    step_s = float(np.median(w.interval_s))
    roll = w.rain.fillna(0.0).rolling(max(1, int(round(86400 / step_s))), min_periods=1).sum()
    rain_daily = roll.groupby(w.day.to_numpy()).max().reindex(days)
    recs = recoveries(idx, rain_daily, rain_mm, alpha)
    bounds = [days[0]] + [r["day"] for r in recs if days[0] < r["day"] <= days[-1]] + \
        [days[-1] + pd.Timedelta(days=1)]
    rec_at = {r["day"]: r for r in recs}
    x_all = ((days - days[0]) / pd.Timedelta(days=1)).to_numpy(dtype=float)
    soiling = np.zeros(len(days), dtype=bool)
    fits = []
    insolation = w.expected.sum(axis=1).groupby(w.day.to_numpy()).sum().reindex(days).to_numpy()
    sigma = robust_sigma(np.log(idx.dropna().to_numpy()))
    for a, b in zip(bounds[:-1], bounds[1:], strict=True):
        sel = (days >= a) & (days < b)
        y = idx.to_numpy()[sel]
        if np.isfinite(y).sum() < min_days:
            continue
        f = mann_kendall_slope(y, x_all[sel])
        if not (f["slope"] < 0 and f["p_value"] / 2 < alpha):
            continue
        line = _hinge(x_all[sel] + 0.5, y, insolation[sel])[0]
        before = idx[sel].dropna().iloc[-min_days:].to_numpy()
        after = idx[(days >= b)].dropna().iloc[:min_days].to_numpy()
        if _restored(line[0], before, after, sigma, alpha) or (
                b > days[-1] and _like(f, [g[3] for g in fits])):
            soiling[sel] = True
            fits.append((a, b, sel, f))
    clean = pd.Series(np.where(soiling, np.nan, idx.to_numpy()), index=days)
    clean_level = clean.rolling(61, center=True, min_periods=10).median()
    ratio = pd.Series(1.0, index=days)
    for _a, _b, sel, f in fits:
        # a day's index stands for its middle (the insolation-weighted centre): x + 0.5
        line, onset, x0 = _hinge(x_all[sel] + 0.5, idx.to_numpy()[sel], insolation[sel])
        f["onset"] = days[0] + pd.Timedelta(days=x0)
        # the rate and its interval from the days after the onset (Theil-Sen)
        post = mann_kendall_slope(idx.to_numpy()[sel][onset:], x_all[sel][onset:])
        f["rate"] = post["slope"] if np.isfinite(post["slope"]) else f["slope"]
        f["rate_low"], f["rate_high"] = post["low"], post["high"]
        # a clean plateau before the onset is this interval's own clean level; without one,
        # the clean level around it where that is higher (a partial recovery), else the start
        # of the line (a full recovery)
        ref = np.full(len(line), line[0])
        if onset < 2:
            ref = np.fmax(ref, clean_level[sel].to_numpy())
        f["clean_level"] = float(np.mean(ref))
        ratio[sel] = np.minimum(1.0, line / ref)
    events, prints = _episodes(w, fits, ratio, rec_at, rel_sigma)
    return events, prints, ratio


def _restored(clean: float, before: np.ndarray, after: np.ndarray, sigma: float,
              alpha: float) -> bool:
    """Whether an interval's recovery is a significant step up that gives back at least half
    of its loss: the median of the days ``after`` it (the first k from the recovery on) less
    the median of the last k days ``before`` it, in log, tested one-sided at ``alpha``
    against the standard error of that difference (1.2533 sigma sqrt(2 / k), ``sigma`` the
    index's daily scale, as in :func:`local_steps_up`), and at least half of the drop from the
    interval's ``clean`` start (its fitted plateau, :func:`_hinge`) to the days before. Soiling
    is undone by a wash (Kimber et al. 2006; Deceglie et al. 2018 count an interval up to its
    recovery); a decline that nothing undoes (ageing, the model's seasonal error, a loss that
    persists) is not soiling."""
    if len(after) == 0 or len(before) == 0 or not sigma > 0 or not clean > 0:
        return False
    step = float(np.log(np.median(after) / np.median(before)))
    lost = float(np.log(clean / np.median(before)))
    z = stats.norm.isf(alpha) * 1.2533 * sigma * np.sqrt(2.0 / len(after))
    return bool(step > z and step >= 0.5 * lost)


def _like(f: dict, confirmed: list[dict]) -> bool:
    """Whether an interval still open at the end of the data declines like the plant's
    confirmed soiling intervals (its Theil-Sen 95 % interval overlaps one of theirs): the
    same soiling building again, where a decline of its own could be anything."""
    return any(f["low"] <= g["high"] and g["low"] <= f["high"] for g in confirmed)


def _hinge(x: np.ndarray, y: np.ndarray, weight: np.ndarray, min_tail: int = 3
           ) -> tuple[np.ndarray, int, float]:
    """Fit y = a + b max(0, x - x0): ``a`` the median of the days before the onset (the clean
    plateau), ``b`` by weighted least squares on the days after it, the onset x0 searched on a
    quarter-day grid by the weighted absolute residuals (robust to a day that the model got
    wrong); the fitted values, the first position at or after the onset, and x0.
    ``weight``: the day's expected energy (a dull day's index is noisier)."""
    ok = np.isfinite(y) & np.isfinite(weight) & (weight > 0)
    sw = np.sqrt(weight[ok])
    best = (np.inf, 0.0, None)
    last = x[max(0, len(x) - min_tail)]
    xo, yo, wo = x[ok], y[ok], weight[ok]
    for x0 in np.arange(x[0], max(last, x[0]) + 1e-9, 0.25):
        h = np.maximum(0.0, xo - x0)
        pre = h == 0
        a0 = float(np.median(yo[pre])) if pre.any() else float(yo[0])
        den = float(np.sum(wo * h * h))
        if den <= 0:
            continue
        b = float(np.sum(wo * h * (yo - a0)) / den)
        cost = float(np.sum(sw * np.abs(yo - a0 - b * h)))
        if cost < best[0] and b < 0:
            best = (cost, float(x0), np.array([a0, b]))
    if best[2] is None:
        return np.full(len(x), np.nanmedian(y)), 0, float(x[0])
    x0, coef = best[1], best[2]
    k = int(np.searchsorted(x, x0))
    return coef[0] + coef[1] * np.maximum(0.0, x - x0), k, x0


def cleaning_saving_kwh(ratio: pd.Series, expected_daily_kwh: pd.Series, clean_day: pd.Timestamp,
                        next_recovery: pd.Timestamp, rate_per_day: float) -> float:
    """Energy a cleaning on ``clean_day`` would have saved until the next recovery [kWh].

    After the cleaning the ratio restarts at 1 and declines again at the fitted rate
    (``rate_per_day`` as a fraction per day, negative), never below the observed ratio.
    """
    sel = (ratio.index >= clean_day) & (ratio.index < next_recovery)
    d = ((ratio.index[sel] - clean_day) / pd.Timedelta(days=1)).to_numpy(dtype=float)
    after = np.maximum(1.0 + rate_per_day * d, ratio[sel].to_numpy())
    e = expected_daily_kwh.reindex(ratio.index[sel]).fillna(0.0).to_numpy()
    return float(np.sum(e * (after - ratio[sel].to_numpy())))


def _episodes(w: Wide, fits: list, ratio: pd.Series, rec_at: dict, rel_sigma: float
              ) -> tuple[list[Event], list[Footprint]]:
    groups: list[list] = []
    for f in fits:
        if groups and groups[-1][-1][1] == f[0]:
            groups[-1].append(f)
        else:
            groups.append([f])
    exp_daily = w.energy_kwh(w.expected).sum(axis=1).groupby(w.day.to_numpy()).sum()
    events, prints = [], []
    days_of = w.day.to_numpy()
    for g in groups:
        a, b = g[0][3]["onset"], g[-1][1]
        sel = (ratio.index >= a) & (ratio.index < b)
        loss = 1 - ratio[sel]
        e_day = exp_daily.reindex(ratio.index[sel]).fillna(0.0)
        energy = float((e_day * loss).sum())
        share = energy / float(e_day.sum()) if e_day.sum() > 0 else 0.0
        intervals, recs = [], []
        for a_i, b_i, sel_i, f in g:
            r = rec_at.get(b_i)
            lo_r = float(1 - ratio[sel_i].iloc[-1])
            intervals.append({"from": a_i.date(), "onset": f["onset"], "to": b_i.date(),
                              "rate_pct_per_day": 100 * f["rate"],
                              "rate_ci95_pct_per_day": [100 * f["rate_low"],
                                                        100 * f["rate_high"]],
                              "whole_interval_theil_sen_pct_per_day": 100 * f["slope"],
                              "kendall_p_value": f["p_value"] / 2, "days": f["n"]})
            if r is not None:
                recs.append({"at": b_i.date(), "cause": r["cause"], "rain_mm": r["rain_mm"],
                             "soiling_loss_pct_before": 100 * lo_r,
                             "detected_step_pct": None if r["detected_step"] is None
                             else 100 * r["detected_step"]})
        # band: the fitted rates' 95 % intervals, scaled on the loss, plus the model error
        rel = np.nanmean([abs((f["rate_high"] - f["rate_low"]) / (2 * 1.96 * f["rate"]))
                          for *_, f in g if f["rate"] != 0])
        low, high = energy_band(energy, float(np.hypot(rel, rel_sigma)))
        savings = {}
        for a_i, b_i, _sel, f in g:
            for k in range(7, int((b_i - a_i).days), 7):
                day = a_i + pd.Timedelta(days=k)
                savings[day.date().isoformat()] = cleaning_saving_kwh(
                    ratio, exp_daily, day, b_i, f["rate"])
        start = pd.Timestamp(a).tz_localize(w.tz).tz_convert("UTC")
        end = pd.Timestamp(b).tz_localize(w.tz).tz_convert("UTC")
        ev = Event(kind="soiling", scope="plant", start=start, end=end, energy_loss_kwh=energy,
                   energy_loss_kwh_low=max(0.0, low), energy_loss_kwh_high=high,
                   method=METHOD,
                   evidence={"test": "Theil-Sen slope, Kendall tau (one-sided)",
                             "intervals": intervals},
                   detail={"loss_pct_of_expected": 100 * share, "recoveries": recs,
                           "cleaning_saving_kwh_by_date": savings})
        events.append(ev)
        rows = np.flatnonzero((days_of >= np.datetime64(a)) & (days_of < np.datetime64(b)))
        lo, hi = int(rows[0]), int(rows[-1]) + 1
        f_int = (1 - ratio).reindex(days_of[lo:hi]).fillna(0.0).to_numpy()
        prints.append(Footprint(ev, lo, hi, w.inverters,
                                factor=np.repeat(f_int[:, None], len(w.inverters), axis=1)))
    return events, prints
