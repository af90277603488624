"""Degradation: the year-on-year method on the daily performance index of clear days.

Each clear day's index (measured / expected over the usable intervals, with the losses already
explained taken out) is paired with the same day one year (365 days) later; the year-on-year
rates R = 100 (PI_{t+365} / PI_t - 1) [%/year] are summarised by their median, and a seeded
bootstrap of the median gives the 95 % confidence interval. The expected series already carries
the site file's ageing allowance (``losses.degradation_pct_per_year``), so the index gives the
rate relative to it; the rate reported is the plant's own: (1 + r_rel)(1 - allowance) - 1.
With less than two years of data the block says "not enough data".

References
----------
Jordan, Deline, Kurtz, Kimball & Anderson 2018, "Robust PV degradation methodology and
application", IEEE J. Photovolt. 8(2):525 (year-on-year, median, bootstrap interval; from
memory); Jordan & Kurtz 2013, Prog. Photovolt. 21(1):12 (median field rate about 0.5 %/yr).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from perfcheck.detect.common import Event, Footprint, Wide, energy_band

METHOD = ("year-on-year median of the daily clear-day performance index, bootstrap 95 % "
          "interval (Jordan et al. 2018)")


def year_on_year(pi: pd.Series, n_boot: int = 2000, seed: int = 61724) -> dict[str, Any]:
    """Median year-on-year rate [%/year] of a daily index and its bootstrap 95 % interval."""
    s = pi.dropna()
    s = s[s > 0]
    later = s.reindex(s.index + pd.Timedelta(days=365))
    r = 100 * (later.to_numpy() / s.to_numpy() - 1)
    r = r[np.isfinite(r)]
    if len(r) < 10:
        return {"rate": None, "low": None, "high": None, "pairs": int(len(r))}
    rng = np.random.default_rng(seed)
    boot = np.median(rng.choice(r, size=(n_boot, len(r)), replace=True), axis=1)
    return {"rate": float(np.median(r)), "low": float(np.percentile(boot, 2.5)),
            "high": float(np.percentile(boot, 97.5)), "pairs": int(len(r))}


def enough_data(days: pd.DatetimeIndex) -> bool:
    """At least two calendar years between the first and the last day (inclusive)."""
    if len(days) == 0:
        return False
    return days.min() + pd.DateOffset(years=2) <= days.max() + pd.Timedelta(days=1)


def detect(w: Wide, pi_plant: pd.Series, allowance_pct: float, commissioned: pd.Timestamp,
           rel_sigma: float) -> tuple[dict[str, Any], list[Event], list[Footprint]]:
    """The ``degradation`` block, its event and footprint (the part beyond the allowance)."""
    block: dict[str, Any] = {"rate_pct_per_year": None, "ci_low": None, "ci_high": None,
                             "method": METHOD, "allowance_pct_per_year": allowance_pct}
    days = pd.DatetimeIndex(w.day.unique())
    if not enough_data(days):
        block["status"] = "not enough data"
        block["detail"] = "less than two years of data"
        return block, [], []
    y = year_on_year(pi_plant)
    if y["rate"] is None:
        block["status"] = "not enough data"
        block["detail"] = f"only {y['pairs']} clear-day pairs one year apart"
        return block, [], []
    a = allowance_pct / 100

    def absolute(rel: float) -> float:
        return 100 * ((1 + rel / 100) * (1 - a) - 1)

    rate, lo, hi = absolute(y["rate"]), absolute(y["low"]), absolute(y["high"])
    block.update({"rate_pct_per_year": rate, "ci_low": lo, "ci_high": hi, "status": "ok",
                  "relative_to_allowance_pct_per_year": y["rate"], "pairs": y["pairs"],
                  "confidence": 0.95})
    years = ((w.index - pd.Timestamp(commissioned, tz="UTC")) / pd.Timedelta(days=365.25)
             ).to_numpy(dtype=float).clip(0, None)
    step = w.interval_s.to_numpy()[:, None] / 3.6e6

    def energy(r_rel_pct: float) -> float:
        """Energy lost beyond the allowance at a relative rate [%/yr] [kWh]."""
        return float(np.nansum(w.expected.to_numpy() * (1 - (1 + r_rel_pct / 100) ** years
                                                         )[:, None] * step))

    total = energy(y["rate"])
    e_lo, e_hi = sorted((energy(y["low"]), energy(y["high"])))
    b_lo, b_hi = energy_band(total, rel_sigma)
    ev = Event(kind="degradation", scope="plant", start=w.index[0],
               end=w.index[-1] + pd.Timedelta(seconds=float(w.interval_s.iloc[-1])),
               energy_loss_kwh=total, energy_loss_kwh_low=min(e_lo, b_lo),
               energy_loss_kwh_high=max(e_hi, b_hi), method=METHOD,
               evidence={"test": "year-on-year median, bootstrap", "rate_pct_per_year": rate,
                         "ci95": [lo, hi], "pairs": y["pairs"],
                         "relative_to_allowance_pct_per_year": y["rate"]},
               detail={"rate_pct_per_year": rate, "allowance_pct_per_year": allowance_pct,
                       "note": "energy lost beyond the ageing allowance that the expected "
                               "series already carries"})
    extra = 1 - (1 + y["rate"] / 100) ** years
    fp = Footprint(ev, 0, len(w.index), w.inverters,
                   factor=np.repeat(extra[:, None], len(w.inverters), axis=1))
    return block, [ev], [fp]
