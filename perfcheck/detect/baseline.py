"""Baseline regression and the sequential test that flags the underperformance periods.

Per inverter, a robust linear model of measured power on expected power with the weather
terms that matter, fitted on a reference window (the first clean weeks after commissioning by
default)::

    P_meas = b0 + b1 E + b2 G + b3 T + b4 G T

with E the expected AC power [kW], G the plane-of-array irradiance [kW/m^2], T the cell
temperature [C]; Huber's T norm (statsmodels RLM). The baseline then predicts every interval;
the daily relative residual (sum measured - sum predicted) / sum predicted is standardised by
its robust noise scale (:func:`perfcheck.detect.common.robust_sigma`) and tracked by a
one-sided lower CUSUM with reference value ``k`` and decision interval ``h`` (in standard
deviations). With k = 0.5 and h = 5.5 the in-control average run length is about 1 550 days
(Siegmund's approximation ARL0 = (exp(2k h') - 2k h' - 1) / (2 k^2), h' = h + 1.166): about one
false alarm per inverter in 4.2 years of independent days. A flagged period runs from the day
after the CUSUM last stood at zero before the alarm to the day it returns to zero.

References
----------
Huber 1964 (Ann. Math. Statist. 35:73), robust regression; Page 1954 (Biometrika 41:100),
CUSUM; Siegmund 1985, Sequential Analysis, Springer, the ARL approximation (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import statsmodels.api as sm

from perfcheck.detect.common import Wide, robust_sigma


@dataclass(frozen=True)
class Flagged:
    inverter: str
    first_day: pd.Timestamp  # site-local day (naive midnight)
    last_day: pd.Timestamp
    cusum_min: float
    shortfall_kwh: float  # predicted - measured over the period


def arl0(k: float, h: float) -> float:
    """In-control average run length of a one-sided CUSUM (Siegmund 1985 approximation) [days]."""
    hp = h + 1.166
    return (math.exp(2 * k * hp) - 2 * k * hp - 1) / (2 * k * k)


TERMS = ("const", "expected_kw", "poa_kwm2", "temp_cell_c", "poa_x_temp")


def _independent_columns(x: np.ndarray) -> list[int]:
    """Columns of the design kept in order while each adds rank (an expected series that is
    itself linear in irradiance and temperature leaves the weather terms redundant)."""
    keep: list[int] = []
    scale = np.maximum(np.abs(x).max(axis=0), 1e-12)
    for j in range(x.shape[1]):
        trial = keep + [j]
        if np.linalg.matrix_rank(x[:, trial] / scale[trial], tol=1e-8) == len(trial):
            keep = trial
    return keep


def _design(e: np.ndarray, g: np.ndarray, t: np.ndarray) -> np.ndarray:
    e, g = e / 1000.0, g / 1000.0
    return np.column_stack([np.ones_like(e), e, g, t, g * t])


def fit(w: Wide, valid: pd.DataFrame, ref_first: pd.Timestamp, ref_days: int,
        max_rows: int = 5000) -> dict[str, dict]:
    """Fit the baseline per inverter on the reference window; coefficients and scale."""
    days = w.day.to_numpy()
    in_ref = (days >= np.datetime64(ref_first)) & (
        days < np.datetime64(ref_first + pd.Timedelta(days=ref_days)))
    out: dict[str, dict] = {}
    for inv in w.inverters:
        sel = in_ref & valid[inv].to_numpy() & np.isfinite(w.poa[inv].to_numpy()) & \
            np.isfinite(w.temp_cell[inv].to_numpy())
        idx = np.flatnonzero(sel)
        if len(idx) < 50:
            continue
        if len(idx) > max_rows:
            idx = idx[np.linspace(0, len(idx) - 1, max_rows).astype(int)]
        x = _design(w.expected[inv].to_numpy()[idx], w.poa[inv].to_numpy()[idx],
                    w.temp_cell[inv].to_numpy()[idx])
        y = w.measured[inv].to_numpy()[idx] / 1000.0
        keep = _independent_columns(x)
        res = sm.RLM(y, x[:, keep], M=sm.robust.norms.HuberT()).fit()
        params = np.zeros(x.shape[1])
        params[keep] = res.params
        out[inv] = {"params": params.tolist(), "terms_used": [TERMS[i] for i in keep],
                    "scale_kw": float(res.scale), "rows": int(len(idx))}
    return out


def predict(w: Wide, params: list[float], inv: str) -> np.ndarray:
    """Baseline prediction [W] for one inverter (NaN where an input is missing)."""
    x = _design(w.expected[inv].to_numpy(), w.poa[inv].to_numpy(), w.temp_cell[inv].to_numpy())
    p = x @ np.asarray(params) * 1000.0
    return np.where(w.expected[inv].to_numpy() > 0, np.maximum(p, 0.0), 0.0)


def cusum_lower(z: np.ndarray, k: float, h: float) -> tuple[np.ndarray, list[tuple[int, int]]]:
    """Lower one-sided CUSUM S_t = min(0, S_{t-1} + z_t + k); alarm periods (start, stop).

    A period starts after the last zero before an alarm (S <= -h) and stops where S returns
    to zero (stop exclusive). NaN days leave S unchanged.
    """
    s = np.zeros(len(z))
    cur, last_zero, alarm = 0.0, 0, False
    periods: list[tuple[int, int]] = []
    for i, v in enumerate(z):
        if np.isfinite(v):
            cur = min(0.0, cur + v + k)
        s[i] = cur
        if cur == 0.0:
            if alarm:
                periods.append((last_zero, i))
                alarm = False
            last_zero = i + 1
        elif cur <= -h:
            alarm = True
    if alarm:
        periods.append((last_zero, len(z)))
    return s, periods


def flag(w: Wide, valid: pd.DataFrame, fits: dict[str, dict], k: float = 0.5, h: float = 5.5
         ) -> tuple[list[Flagged], dict[str, dict]]:
    """Flagged underperformance periods per inverter, and the statistics behind them."""
    days = w.day.to_numpy()
    step = w.interval_s.to_numpy()
    flagged: list[Flagged] = []
    info: dict[str, dict] = {}
    for inv, f in fits.items():
        pred = predict(w, f["params"], inv)
        ok = valid[inv].to_numpy()
        m = np.where(ok, w.measured[inv].to_numpy(), np.nan)
        p = np.where(ok & np.isfinite(m), pred, np.nan)
        frame = pd.DataFrame({"m": m * step / 3.6e6, "p": p * step / 3.6e6})
        daily = frame.groupby(days).sum(min_count=1)
        big = daily["p"] >= 0.25 * daily["p"].median()
        r = ((daily["m"] - daily["p"]) / daily["p"]).where(big)
        sigma = robust_sigma(r.to_numpy())
        center = float(np.nanmedian(r.to_numpy()))
        z = ((r - center) / sigma).to_numpy() if sigma > 0 else np.full(len(r), np.nan)
        _, periods = cusum_lower(z, k, h)
        for a, b in periods:
            seg = daily.iloc[a:b]
            flagged.append(Flagged(inv, daily.index[a], daily.index[b - 1],
                                   float(np.nanmin(np.cumsum(np.nan_to_num(z[a:b] + k)))),
                                   float((seg["p"] - seg["m"]).sum())))
        info[inv] = {"sigma_daily": sigma, "center": center, "periods": len(periods)}
    return flagged, info
