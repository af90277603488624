"""Baseline regression and the sequential test that flags the underperformance periods.

Per inverter, a robust linear model of measured power on expected power with the weather
terms that matter, fitted on a reference window (the first clean weeks after commissioning by
default)::

    P_meas = b0 + b1 E + b2 G + b3 T + b4 G T

with E the expected AC power [kW], G the plane-of-array irradiance [kW/m^2], T the cell
temperature [C]; Huber's T norm (statsmodels RLM). The baseline then predicts every interval;
the daily relative residual (sum measured - sum predicted) / sum predicted is standardised by
an AR(1) model of its noise: residuals of neighbouring days are alike (lag-1 autocorrelation
phi often 0.3-0.6), so a CUSUM of them standardised day by day alarms far too often. The lag-1
autocorrelation and the long-run standard deviation come from
:func:`perfcheck.detect.common.long_run_sigma` (differences only, robust to level shifts); the
CUSUM runs on the standardised innovations z_t = (x_t - phi x_{t-1}) / sd_a, sd_a^2 = sigma_LR^2
(1 - phi)^2 (x the centred residual; after a missing day z_t = x_t / sd_x), which are
independent in control (residual CUSUM: Alwan & Roberts 1988; Runger, Willemain & Prabhu 1995).
A sustained shift delta of the residual moves z by delta (1 - phi) / sd_a = delta / sigma_LR:
the shift counts in long-run standard deviations. A one-sided lower CUSUM with reference value
``k`` and decision interval ``h`` (in standard deviations) tracks z. With k = 0.5 and h = 5.5
the in-control average run length is about 1 550 days (Siegmund's approximation ARL0 =
(exp(2k h') - 2k h' - 1) / (2 k^2), h' = h + 1.166): about one false alarm per inverter in
4.2 years, checked by Monte Carlo on AR(1) residuals as well as independent ones. A flagged
period runs from the day after the CUSUM last stood at zero before the alarm to the day it
returns to zero.

Model error shared by the inverters (a season the model handles worse: low light, spectrum,
incidence angle, all in the daily residual for weeks) is not a fault of one of them. With
siblings, the CUSUM therefore runs on each inverter's residual less the median of its
siblings' residuals that day (a difference of paired series: what they share cancels; common
practice in fleet comparisons, e.g. the sibling ratio of :mod:`perfcheck.detect.partial`).
A plant of one inverter has only its own residual, where a season's model error looks like a
fault, and siblings of another tilt or azimuth keep the part of it that depends on the plane.
Each flagged period is therefore also judged as a level shift (:func:`shift_z`) on what the
detectors leave unexplained on the intervals of measurable light (:func:`remaining_levels`:
a shortfall an event explains is no shift of the level of what remains, a dim day's model
error none of the array): its mean shortfall against the standard error of a mean of n
autocorrelated days (sigma_LR^2 / n) plus the mean square of the 30-day means outside the
period about the series' centre. The latter measures how far the model's seasonal error
carries the level from its centre in the other seasons of the record; where the record holds
no other year, the period's own season is judged by how far the other seasons stray. The
mean of a period of a zero-mean slow error has a variance of at most that of its 30-day means
(a mean of positively correlated values varies no more than one of them); resting on a few
months, the ratio is read against Student's t. The attribution reports a period only when
its normal-equivalent z >= 3 (one-sided 0.13 %). A season with no interval of measurable
light (a high-latitude winter) has no level to judge, and no period in it is reported; nor
is a period that leaves fewer than three months of the record outside it (nothing to judge it
against: its shortfall stays in what the detectors leave unexplained).

References
----------
Huber 1964 (Ann. Math. Statist. 35:73), robust regression; Page 1954 (Biometrika 41:100),
CUSUM; Siegmund 1985, Sequential Analysis, Springer, the ARL approximation (from memory);
Bagshaw & Johnson 1975, Technometrics 17(1):73, CUSUM of autocorrelated data; Alwan & Roberts
1988, J. Bus. Econ. Stat. 6(1):87, and Runger, Willemain & Prabhu 1995, J. Qual. Technol.
27(1):11, control charts on the residuals of a time-series model (all from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from perfcheck.detect.common import Wide, long_run_sigma
from perfcheck.lazy import lazy_module

# the two modules called, not statsmodels.api (which loads its plots, time series and formulas)
norms = lazy_module("statsmodels.robust.norms")
stats = lazy_module("scipy.stats")
robust_linear_model = lazy_module("statsmodels.robust.robust_linear_model")


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


# Plane-of-array irradiance [W/m^2] above which a ratio to expected is read as the array's
# level: below it the model's low-light and diffuse errors, which differ by the plane's tilt
# and azimuth, weigh as much as a fault. The floor of the reporting irradiance of the capacity
# test (ASTM E2939-13, from memory; as in perfcheck.capacity).
MEASURABLE_WM2 = 400.0

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
        res = robust_linear_model.RLM(y, x[:, keep], M=norms.HuberT()).fit()
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


def innovations(x: np.ndarray, sigma_lr: float, phi: float) -> np.ndarray:
    """Standardised AR(1) innovations of a centred series (NaN stays NaN; see module doc).

    z_t = (x_t - phi x_{t-1}) / sd_a with sd_a = sigma_LR (1 - phi) (the innovation scale of
    AR(1) noise with long-run sigma sigma_LR); z_t = x_t / sd_x, sd_x = sigma_LR
    sqrt((1 - phi) / (1 + phi)), after a missing day. All NaN when sigma_LR is not positive.
    """
    if not sigma_lr > 0:
        return np.full(len(x), np.nan)
    prev = np.r_[np.nan, x[:-1]]
    sd_x = sigma_lr * np.sqrt((1 - phi) / (1 + phi))
    return np.where(np.isfinite(prev), (x - phi * prev) / (sigma_lr * (1 - phi)), x / sd_x)


def shift_z(x: pd.Series, a: int, b: int, sigma_lr: float, block_days: int = 30,
            min_days: int = 10) -> float:
    """Mean shortfall of the centred daily series ``x`` over positions ``a:b``, in standard
    errors, as the standard normal quantile of its one-sided probability: t = -mean /
    sqrt(v_n + v_m), v_n = sigma_LR^2 / n with n the period's days with a value, v_m = s_m^2
    the mean square, about the centre 0, of the means of the K consecutive ``block_days``
    blocks of the days outside the period (blocks with at least ``min_days`` of them). v_m
    rests on K values only: t is read against Student's t with Welch-Satterthwaite's degrees
    of freedom K (1 + v_n / v_m)^2 (sigma_LR, from hundreds of days, taken as known), a normal
    where v_m = 0. NaN without a value in the period, and NaN with fewer than three blocks
    outside it: a period that takes nearly the whole record leaves nothing to tell how far the
    model's slow error carries the level, and taking that error as none would make a season
    the model handles worse (or a reference window in its best season) a certain shortfall.

    References
    ----------
    Hamilton 1994, Time Series Analysis, sec. 7.2 (variance of a mean of autocorrelated
    values); Satterthwaite 1946, Biometrics Bull. 2(6):110, and Welch 1947, Biometrika
    34:28, the degrees of freedom of a sum of variance estimates (from memory); the spread of
    the level's monthly means as the model's slow error, and the month as its block, are
    common practice.
    """
    inside = x.iloc[a:b].dropna()
    if inside.empty:
        return float("nan")
    out = x.drop(x.index[a:b]).dropna()
    means = np.empty(0)
    if len(out):
        block = ((out.index - x.index[0]).days // block_days).to_numpy()
        g = out.groupby(block)
        means = g.mean()[g.count() >= min_days].to_numpy()
    if len(means) < 3:
        return float("nan")
    v_m = float(np.mean(means**2))
    v_n = (sigma_lr if math.isfinite(sigma_lr) else 0.0) ** 2 / len(inside)
    if not v_n + v_m > 0:
        return math.inf
    t = -float(inside.mean()) / math.sqrt(v_n + v_m)
    if v_m == 0:
        return t
    dof = len(means) * (1 + v_n / v_m) ** 2
    return float(stats.norm.isf(stats.t.sf(t, dof)))


def _ratio(gap: pd.Series, reference: pd.Series) -> pd.Series:
    """Daily relative residual gap / reference, NaN on days whose reference is under a
    quarter of its median over the days with any (a dark day's ratio is mostly noise)."""
    return (gap / reference).where(reference >= 0.25 * reference[reference > 0].median())


def _daily(w: Wide, valid: pd.DataFrame, fits: dict[str, dict]) -> dict[str, pd.DataFrame]:
    """Per inverter, the daily measured and predicted energy [kWh] (columns m, p) and the
    relative residual r (:func:`_ratio`)."""
    days = w.day.to_numpy()
    step = w.interval_s.to_numpy()
    out = {}
    for inv, f in fits.items():
        pred = predict(w, f["params"], inv)
        ok = valid[inv].to_numpy()
        m = np.where(ok, w.measured[inv].to_numpy(), np.nan)
        p = np.where(ok & np.isfinite(m), pred, np.nan)
        frame = pd.DataFrame({"m": m * step / 3.6e6, "p": p * step / 3.6e6})
        daily = frame.groupby(days).sum(min_count=1)
        daily["r"] = _ratio(daily["m"] - daily["p"], daily["p"])
        out[inv] = daily
    return out


def _relative(resid: pd.DataFrame) -> dict[str, pd.Series]:
    """Per inverter (column), the daily relative residual less the median of its siblings'
    where it has any (a day's weather errs alike on all of them)."""
    if resid.shape[1] < 2:
        return {inv: resid[inv] for inv in resid}
    return {inv: resid[inv] - resid.drop(columns=inv).median(axis=1) for inv in resid}


def remaining_levels(w: Wide, shortfall_w: np.ndarray, expected_w: np.ndarray
                     ) -> dict[str, pd.Series]:
    """Per inverter, the daily relative level of what the detectors leave unexplained
    (``shortfall_w``: expected less measured less the losses found [W], per interval and
    inverter) on the intervals of measurable light (plane-of-array irradiance at least
    :data:`MEASURABLE_WM2`: a dim day's model error is no level of the array) where
    ``expected_w`` is finite (NaN: no level judged there), less its siblings'
    (:func:`_relative`) and centred at its median: the series :func:`shift_z` judges."""
    lit = (w.poa[w.inverters].to_numpy() >= MEASURABLE_WM2) & np.isfinite(expected_w)
    step = np.where(lit, w.interval_s.to_numpy()[:, None] / 3.6e6, 0.0)
    days = w.day.to_numpy()
    gap = pd.DataFrame(-shortfall_w * step, columns=w.inverters).groupby(days).sum()
    ref = pd.DataFrame(expected_w * step, columns=w.inverters).groupby(days).sum()
    rel = _relative(pd.DataFrame({inv: _ratio(gap[inv], ref[inv]) for inv in w.inverters}))
    return {inv: r - float(np.nanmedian(r.to_numpy())) for inv, r in rel.items()}


def flag(w: Wide, valid: pd.DataFrame, fits: dict[str, dict], k: float = 0.5, h: float = 5.5
         ) -> tuple[list[Flagged], dict[str, dict]]:
    """Flagged underperformance periods per inverter (on the ``valid`` intervals), and the
    statistics behind them."""
    flagged: list[Flagged] = []
    info: dict[str, dict] = {}
    per = _daily(w, valid, fits)
    resid = pd.DataFrame({inv: d["r"] for inv, d in per.items()})
    for inv, r in _relative(resid).items():
        daily = per[inv]
        sigma, phi = long_run_sigma(r.to_numpy())
        center = float(np.nanmedian(r.to_numpy()))
        z = innovations(r.to_numpy() - center, sigma, phi)
        _, periods = cusum_lower(z, k, h)
        for a, b in periods:
            seg = daily.iloc[a:b]
            flagged.append(Flagged(inv, daily.index[a], daily.index[b - 1],
                                   float(np.nanmin(np.cumsum(np.nan_to_num(z[a:b] + k)))),
                                   float((seg["p"] - seg["m"]).sum())))
        info[inv] = {"sigma_long_run": sigma, "lag1_autocorrelation": phi, "center": center,
                     "periods": len(periods),
                     "against_siblings": len(per) > 1}
    return flagged, info
