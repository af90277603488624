"""Degradation: the year-on-year method on the daily performance index.

Each day's index (measured / expected over the usable intervals, with the losses already
explained taken out) is paired with the same day one year (365 days) later; the year-on-year
rates R = 100 (PI_{t+365} / PI_t - 1) [%/year] are summarised by their median. Every day with
enough usable expected energy counts, as in the published method: the model's seasonal and
weather-dependent errors recur a year later and cancel in the pair, the median takes care of
odd days, and a clear-day filter leaves too few pairs in a cloudy climate (a handful a year).

Interval: the rates of neighbouring days share their weather and soiling, so they are not
independent (lag-1 autocorrelation about 0.5 on real plants). A seeded bootstrap resamples
whole calendar months of pairs (the month of the earlier day), with replacement, and takes the
percentile interval of the median (non-overlapping block bootstrap: Carlstein 1986; Kunsch
1989). The irradiance sensor's calibration drifts between the two years of a pair; a change of
1 % of the reference moves every pair by about 1 %/yr and no resampling can see it. Its
stability ``[model] sensor_stability_pct_per_year`` (default by ``sensor_class``: ISO 9060
non-stability limits, :data:`STABILITY_PCT_PER_YEAR`) is taken as the half-width of a
rectangular distribution, u = s / sqrt(3) (GUM 4.3.7), not reduced by the number of years (a
drift in one direction does not average out), and added to each side of the bootstrap interval
in quadrature at the same coverage (GUM 5.1.2). The expected series already carries
the site file's ageing allowance (``losses.degradation_pct_per_year``), so the index gives the
rate relative to it; the rate reported is the plant's own: (1 + r_rel)(1 - allowance) - 1.
With less than two years of data the block says "not enough data".

References
----------
Jordan, Deline, Kurtz, Kimball & Anderson 2018, "Robust PV degradation methodology and
application", IEEE J. Photovolt. 8(2):525 (year-on-year, median, bootstrap interval; from
memory); Jordan & Kurtz 2013, Prog. Photovolt. 21(1):12 (median field rate about 0.5 %/yr);
Carlstein 1986, Ann. Statist. 14(3):1171 (non-overlapping block bootstrap, from memory); Kunsch
1989, Ann. Statist. 17(3):1217 (block bootstrap of dependent data); JCGM 100:2008 (GUM) 4.3.7
and 5.1.2; ISO 9060:2018 pyranometer classes, non-stability per year (from memory).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from perfcheck.detect.common import Z95, Event, Footprint, Wide, energy_band
from perfcheck.site import Model

METHOD = ("year-on-year median of the daily performance index, bootstrap 95 % "
          "interval over calendar-month blocks of pairs, widened in quadrature by the "
          "irradiance sensor's stability (Jordan et al. 2018; Carlstein 1986; GUM)")
# Largest change of a pyranometer's responsivity per year [%/yr] by class: ISO 9060:2018
# non-stability, spectrally flat class A 0.8, B 1.5, C 3 (from memory), taken for the
# IEC 61724-1 monitoring classes A, B, C.
STABILITY_PCT_PER_YEAR = {"A": 0.8, "B": 1.5, "C": 3.0}


def sensor_stability(model: Model) -> tuple[float, str]:
    """The irradiance sensor's stability [%/yr] and where it came from."""
    if model.sensor_stability_pct_per_year is not None:
        return model.sensor_stability_pct_per_year, "site file model.sensor_stability_pct_per_year"
    return (STABILITY_PCT_PER_YEAR[model.sensor_class],
            f"ISO 9060 non-stability of a class {model.sensor_class} sensor (from memory)")


def pairs(pi: pd.Series) -> pd.Series:
    """Year-on-year rates R = 100 (PI_{t+365} / PI_t - 1) [%/yr], indexed by the earlier day."""
    s = pi.dropna()
    s = s[s > 0]
    later = s.reindex(s.index + pd.Timedelta(days=365))
    r = pd.Series(100 * (later.to_numpy() / s.to_numpy() - 1), index=s.index)
    return r[np.isfinite(r.to_numpy())]


def ageing_removed(pi: pd.DataFrame, pi_plant: pd.Series) -> pd.DataFrame:
    """The daily index ``pi`` (days by inverters) with the plant's year-on-year trend taken out.

    A first pass of the year-on-year median on the plant index before soiling is known
    (``pi_plant``), so that the soiling detector does not read ageing as a slow decline:
    degradation and soiling are separated in two passes, in the spirit of the combined
    degradation and soiling method of Skomedal & Deceglie 2020 (IEEE J. Photovolt. 10(6):1788,
    from memory). Unchanged without 10 pairs one year apart.
    """
    r = pairs(pi_plant)
    if len(r) < 10:
        return pi
    rate = float(np.median(r.to_numpy())) / 100
    years = ((pi.index - pi.index[0]) / pd.Timedelta(days=365.25)).to_numpy(dtype=float)
    return pi.div((1 + rate) ** years, axis=0)


def block_median_bootstrap(r: np.ndarray, blocks: np.ndarray, n_boot: int,
                           rng: np.random.Generator) -> np.ndarray:
    """Medians of ``n_boot`` resamples that draw whole blocks with replacement.

    Parameters
    ----------
    r : values (e.g. year-on-year rates) in time order
    blocks : block label of each value (e.g. its calendar month); as many blocks are drawn
        as there are, so a resample has about as many values as ``r``
    n_boot : number of resamples
    rng : seeded generator

    Notes
    -----
    Non-overlapping block bootstrap (Carlstein 1986, Ann. Statist. 14(3):1171, from memory;
    Kunsch 1989, Ann. Statist. 17(3):1217): dependence inside a block is kept whole. With one
    value per block it is the i.i.d. bootstrap.
    """
    _, inverse = np.unique(blocks, return_inverse=True)
    groups = [r[inverse == g] for g in range(inverse.max() + 1)]
    draws = rng.integers(0, len(groups), size=(n_boot, len(groups)))
    return np.array([np.median(np.concatenate([groups[g] for g in d])) for d in draws])


def year_on_year(pi: pd.Series, stability_pct_per_year: float = 0.0, n_boot: int = 2000,
                 seed: int = 61724) -> dict[str, Any]:
    """Median year-on-year rate [%/year] of a daily index and its 95 % interval.

    The interval is the percentile interval of a calendar-month block bootstrap of the
    median, each side widened in quadrature by 1.96 s / sqrt(3), s the sensor's stability
    [%/yr] (rectangular, GUM 4.3.7; combined per GUM 5.1.2).
    """
    r = pairs(pi)
    if len(r) < 10:
        return {"rate": None, "low": None, "high": None, "pairs": int(len(r))}
    months = (r.index.year * 12 + r.index.month).to_numpy()
    boot = block_median_bootstrap(r.to_numpy(), months, n_boot, np.random.default_rng(seed))
    rate = float(np.median(r.to_numpy()))
    lo, hi = np.percentile(boot, [2.5, 97.5])
    d = Z95 * stability_pct_per_year / np.sqrt(3)
    return {"rate": rate, "low": float(rate - np.hypot(rate - lo, d)),
            "high": float(rate + np.hypot(hi - rate, d)), "pairs": int(len(r)),
            "blocks": int(len(np.unique(months))), "sampling_low": float(lo),
            "sampling_high": float(hi), "stability_u_pct_per_year": float(d / Z95)}


def enough_data(days: pd.DatetimeIndex) -> bool:
    """At least two calendar years between the first and the last day (inclusive)."""
    if len(days) == 0:
        return False
    return days.min() + pd.DateOffset(years=2) <= days.max() + pd.Timedelta(days=1)


def detect(w: Wide, pi_plant: pd.Series, allowance_pct: float, commissioned: pd.Timestamp,
           rel_sigma: float, model: Model) -> tuple[dict[str, Any], list[Event], list[Footprint]]:
    """The ``degradation`` block, its event and footprint (the part beyond the allowance)."""
    stability, stability_source = sensor_stability(model)
    block: dict[str, Any] = {"rate_pct_per_year": None, "ci_low": None, "ci_high": None,
                             "method": METHOD, "allowance_pct_per_year": allowance_pct,
                             "sensor_stability_pct_per_year": stability,
                             "sensor_stability_source": stability_source}
    days = pd.DatetimeIndex(w.day.unique())
    if not enough_data(days):
        block["status"] = "not enough data"
        block["detail"] = "less than two years of data"
        return block, [], []
    y = year_on_year(pi_plant, stability)
    if y["rate"] is None:
        block["status"] = "not enough data"
        block["detail"] = f"only {y['pairs']} day pairs one year apart"
        return block, [], []
    a = allowance_pct / 100

    def absolute(rel: float) -> float:
        return 100 * ((1 + rel / 100) * (1 - a) - 1)

    rate, lo, hi = absolute(y["rate"]), absolute(y["low"]), absolute(y["high"])
    block.update({"rate_pct_per_year": rate, "ci_low": lo, "ci_high": hi, "status": "ok",
                  "relative_to_allowance_pct_per_year": y["rate"], "pairs": y["pairs"],
                  "month_blocks": y["blocks"], "confidence": 0.95,
                  "sampling_ci_low": absolute(y["sampling_low"]),
                  "sampling_ci_high": absolute(y["sampling_high"])})
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
               evidence={"test": "year-on-year median, month-block bootstrap and sensor "
                                 "stability", "rate_pct_per_year": rate,
                         "ci95": [lo, hi], "pairs": y["pairs"],
                         "relative_to_allowance_pct_per_year": y["rate"]},
               detail={"rate_pct_per_year": rate, "allowance_pct_per_year": allowance_pct,
                       "note": "energy lost beyond the ageing allowance that the expected "
                               "series already carries"})
    extra = 1 - (1 + y["rate"] / 100) ** years
    fp = Footprint(ev, 0, len(w.index), w.inverters,
                   factor=np.repeat(extra[:, None], len(w.inverters), axis=1))
    return block, [ev], [fp]
