"""Shared pieces of the detectors: the wide view of the aligned series, daily performance
index, clear-day selection, change-point search, energy bands and the event record.

Every detector is a pure function over a :class:`Wide` (one column per inverter, one row per
interval, UTC index) and returns :class:`Event` records plus, where it explains part of the
shortfall, a per-interval share of the expected power it accounts for (see ``attribution``).
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from perfcheck.lazy import PVLIB_WITH_INIT, lazy_module, lazy_package

pvlib = lazy_package("pvlib", PVLIB_WITH_INIT)
stats = lazy_module("scipy.stats")

KINDS = (
    "outage",
    "partial_outage",
    "clipping",
    "curtailment",
    "soiling",
    "shading",
    "degradation",
    "sensor_fault",
    "clock_fault",
    "underperformance",
)

# Two-sided 95 % normal quantile, used for every energy band.
Z95 = 1.959964
# No performance model is better than about 1 % over weeks (common practice, no source): the
# floor of the relative error of expected energy, for every band and significance test.
MODEL_FLOOR = 0.01


@dataclass
class Event:
    """One finding: what, where, when, how much, and the statistic behind it."""

    kind: str
    scope: str  # 'plant' or 'inverter:<id>'
    start: pd.Timestamp  # UTC, inclusive (start of the first interval)
    end: pd.Timestamp  # UTC, exclusive (end of the last interval)
    energy_loss_kwh: float
    energy_loss_kwh_low: float
    energy_loss_kwh_high: float
    method: str
    evidence: dict[str, Any] = field(default_factory=dict)
    detail: dict[str, Any] = field(default_factory=dict)

    def to_dict(self, tz: dt.tzinfo) -> dict[str, Any]:
        """The JSON form: times ISO 8601 with the site zone's offset, numbers rounded."""
        out = {
            "kind": self.kind,
            "scope": self.scope,
            "start": self.start.tz_convert(tz).isoformat(),
            "end": self.end.tz_convert(tz).isoformat(),
            "energy_loss_kwh": _round(_finite(self.energy_loss_kwh)),
            "energy_loss_kwh_low": _round(_finite(self.energy_loss_kwh_low)),
            "energy_loss_kwh_high": _round(_finite(self.energy_loss_kwh_high)),
            "method": self.method,
            "evidence": _jsonable(self.evidence),
        }
        out.update(_jsonable(self.detail))
        return out


def _finite(x: float) -> float:
    """Energies are numbers in the JSON: an undefined band (no data) is 0."""
    return float(x) if x is not None and math.isfinite(x) else 0.0


def _round(x: float) -> float | None:
    if x is None or not math.isfinite(x):
        return None
    return round(float(x), 3)


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer, int)):
        return int(obj)
    if isinstance(obj, (np.floating, float)):
        return _round(float(obj)) if abs(obj) >= 1e-3 or obj == 0 else float(f"{obj:.4g}")
    if isinstance(obj, pd.Timestamp):
        return obj.isoformat()
    if isinstance(obj, (dt.date, dt.datetime)):
        return obj.isoformat()
    return obj


def scope_of(inverter_id: str | None) -> str:
    return "plant" if inverter_id is None else f"inverter:{inverter_id}"


# --------------------------------------------------------------------------------------------
# the wide view


@dataclass
class Wide:
    """The aligned series, one column per inverter, on one UTC interval index.

    Power in [W], irradiance in [W/m^2], temperature in [C], angles in [deg].
    ``day`` is the site-local calendar day of each interval (naive midnight timestamps).
    """

    measured: pd.DataFrame
    expected: pd.DataFrame
    potential: pd.DataFrame
    expected_modelled: pd.DataFrame  # expected from the modelled POA alone (model stage)
    potential_modelled: pd.DataFrame
    poa: pd.DataFrame
    poa_modelled: pd.DataFrame
    temp_cell: pd.DataFrame
    flagged: pd.DataFrame  # bool: a quality flag sits on a reading behind this row
    from_sensor: pd.DataFrame  # bool: the plane irradiance of this row is the POA sensor's
    # bool: the plane irradiance of this row follows the POA sensor's reading, carried to
    # another plane for some of the inverter's arrays (perfcheck.physics.poa_translated)
    translated: pd.DataFrame
    interval_s: pd.Series
    ghi: pd.Series
    clearsky_ghi: pd.Series
    zenith: pd.Series
    azimuth: pd.Series
    rain: pd.Series
    day: pd.Series
    ac_w: pd.Series  # AC rating per inverter [W]
    export_limit_w: float | None
    tz: dt.tzinfo

    @property
    def inverters(self) -> list[str]:
        return list(self.measured.columns)

    @property
    def index(self) -> pd.DatetimeIndex:
        return self.measured.index

    @property
    def follows_sensor(self) -> pd.DataFrame:
        """bool: the row's plane irradiance is the POA sensor's reading, or carried from it."""
        return self.from_sensor | self.translated

    def energy_kwh(self, power_w: pd.DataFrame | pd.Series) -> pd.DataFrame | pd.Series:
        """Interval energy [kWh] of a power [W] frame on this index."""
        return power_w.mul(self.interval_s.to_numpy() / 3.6e6, axis=0)

    def end_of(self, ts: pd.Timestamp) -> pd.Timestamp:
        return ts + pd.Timedelta(seconds=float(self.interval_s.loc[ts]))


def wide(df: pd.DataFrame, ac_w: dict[str, float], export_limit_w: float | None,
         tz: dt.tzinfo) -> Wide:
    """Pivot the aligned rows (``perfcheck.align.load_aligned``) to a :class:`Wide`."""
    ts = pd.DatetimeIndex(df["ts"]).tz_convert("UTC")
    inv = df["inverter_id"].astype(str).to_numpy()
    found = set(inv)
    ids = sorted(found, key=list(ac_w).index if found <= set(ac_w) else str)
    index = pd.DatetimeIndex(ts.unique()).sort_values()
    rows = index.get_indexer(ts)
    cols = pd.Index(ids).get_indexer(inv)
    # the rows already in the grid's order, one per instant and inverter (as load_aligned
    # gives them): each column is the rows' values reshaped
    in_order = len(ts) == len(index) * len(ids) and np.array_equal(
        rows * len(ids) + cols, np.arange(len(ts)))

    def grid(values: np.ndarray, fill: Any = np.nan, dtype: Any = float) -> pd.DataFrame:
        if in_order:
            out = np.asarray(values, dtype=dtype).reshape(len(index), len(ids))
        else:
            out = np.full((len(index), len(ids)), fill, dtype=dtype)
            out[rows, cols] = values
        return pd.DataFrame(out, index=index, columns=ids)

    def num(name: str) -> np.ndarray:
        return pd.to_numeric(df[name], errors="coerce").to_numpy(dtype=float, na_value=np.nan)

    # each instant's first row (the stable sort of np.unique keeps the first of equal row
    # numbers), in the order of ``index``
    first = np.unique(rows, return_index=True)[1]
    site_rows = pd.DataFrame(index=index)
    for name in ("interval_s", "ghi_wm2", "clearsky_ghi_wm2", "sun_zenith_deg",
                 "sun_azimuth_deg", "rain_mm"):
        site_rows[name] = num(name)[first]
    flags = df["flags"].fillna("").astype(str).to_numpy()
    source = df["poa_source"].astype(str).to_numpy()
    return Wide(
        measured=grid(num("measured_ac_w")),
        expected=grid(num("expected_ac_w")),
        potential=grid(num("potential_ac_w")),
        expected_modelled=grid(num("expected_ac_modelled_w")),
        potential_modelled=grid(num("potential_ac_modelled_w")),
        poa=grid(num("poa_wm2")),
        poa_modelled=grid(num("poa_modelled_wm2")),
        temp_cell=grid(num("temp_cell_c")),
        flagged=grid(flags != "", fill=False, dtype=bool),
        from_sensor=grid(source == "sensor", fill=False, dtype=bool),
        translated=grid(source == "translated", fill=False, dtype=bool),
        interval_s=site_rows["interval_s"].fillna(site_rows["interval_s"].median()),
        ghi=site_rows["ghi_wm2"],
        clearsky_ghi=site_rows["clearsky_ghi_wm2"],
        zenith=site_rows["sun_zenith_deg"],
        azimuth=site_rows["sun_azimuth_deg"],
        rain=site_rows["rain_mm"],
        # the local wall clock floored to midnight (normalising the zoned instants localises
        # every midnight again, only for the zone to be dropped)
        day=pd.Series(index.tz_convert(tz).tz_localize(None).normalize(), index=index),
        ac_w=pd.Series({i: ac_w[i] for i in ids}, dtype=float),
        export_limit_w=export_limit_w,
        tz=tz,
    )


# --------------------------------------------------------------------------------------------
# daily quantities


def daylight(w: Wide, min_share: float = 0.05) -> pd.DataFrame:
    """Intervals where the model expects at least ``min_share`` of the AC rating."""
    return w.expected.ge(w.ac_w * min_share, axis=1) & w.measured.notna()


def daily_sum(frame: pd.DataFrame | pd.Series, w: Wide) -> pd.DataFrame | pd.Series:
    """Sum per site-local day (NaN skipped; a day with no values gives 0)."""
    return frame.groupby(w.day.to_numpy()).sum(min_count=1)


def daily_pi(w: Wide, valid: pd.DataFrame, measured: pd.DataFrame | None = None,
             min_share: float = 0.25) -> pd.DataFrame:
    """Insolation-weighted daily performance index per inverter: sum(measured) / sum(expected).

    Only ``valid`` intervals count. A day whose valid expected energy is below ``min_share`` of
    that inverter's median daily expected energy gives NaN (too little to judge).

    References
    ----------
    Deceglie, Micheli & Muller 2018 (IEEE J. Photovolt. 8(2):547), the insolation-weighted
    daily performance index (from memory).
    """
    m = (w.measured if measured is None else measured).where(valid)
    e = w.expected.where(valid & m.notna())
    em = daily_sum(e, w)
    mm = daily_sum(m, w)
    big = em.ge(em.median() * min_share, axis=1)
    return (mm / em).where(big)


def clear_days(w: Wide, clearsky_plane: pd.DataFrame | None = None, scale_lo: float = 0.85,
               scale_hi: float = 1.15, max_nrmse: float = 0.08) -> pd.Series:
    """Site-local days with a clear sky, judged on GHI against the clear-sky GHI.

    A day is clear when its GHI is a scaled copy of the clear-sky curve: the daily ratio of
    GHI to clear-sky GHI lies in [scale_lo, scale_hi] (clear-sky models carry about ±10 %
    absolute error) and the RMS difference to the scaled curve is at most ``max_nrmse`` of the
    day's mean clear-sky irradiance. In the spirit of Reno & Hansen 2016 (Renewable Energy
    90:520), applied to whole days; the limits are common practice, no source. Without GHI,
    the mean plane-of-array irradiance of the inverters is judged the same way against the
    mean of ``clearsky_plane`` (their clear-sky plane irradiance,
    :func:`clearsky_poa`), else against the modelled POA (a shape check only: where the
    modelled POA comes from the same sensor every day passes).
    """
    sun = w.zenith < 80
    ghi = w.ghi
    cs = w.clearsky_ghi
    if ghi.notna().sum() < 0.5 * sun.sum():
        ghi = w.poa.mean(axis=1)
        cs = (w.poa_modelled if clearsky_plane is None else clearsky_plane).mean(axis=1)
    g, c = ghi.where(sun), cs.where(sun & ghi.notna())
    days = w.day.to_numpy()
    sg = g.groupby(days).sum(min_count=1)
    sc = c.groupby(days).sum(min_count=1)
    scale = sg / sc
    per = pd.Series(scale.reindex(days).to_numpy(), index=w.index)
    sq = ((g - c * per) ** 2).groupby(days).mean()
    mean_c = c.groupby(days).mean()
    nrmse = np.sqrt(sq) / mean_c
    n = g.notna().groupby(days).sum()
    need = sun.groupby(days).sum()
    ok = scale.between(scale_lo, scale_hi) & (nrmse <= max_nrmse) & (n >= 0.8 * need)
    return ok.fillna(False).astype(bool)


def robust_sigma(x: np.ndarray | pd.Series) -> float:
    """Scale of a noise series that is robust to outliers and level shifts.

    1.4826 · MAD of the first differences / sqrt(2) (the differences of i.i.d. noise have
    twice its variance; a level shift touches one difference only). NaN skipped.
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if len(x) < 3:
        return float("nan")
    d = np.diff(x)
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / math.sqrt(2))


def _mad_var(x: np.ndarray) -> float:
    """Squared MAD-based scale (1.4826 MAD, consistent for the normal; Hampel 1974)."""
    return float((1.4826 * np.median(np.abs(x - np.median(x)))) ** 2)


def long_run_sigma(x: np.ndarray | pd.Series, phi_max: float = 0.9) -> tuple[float, float]:
    """Long-run standard deviation of an AR(1)-like noise series, robust to outliers and
    level shifts, and its lag-1 autocorrelation phi.

    sigma_LR^2 = sum over all lags of the autocovariance; for AR(1) noise of variance s^2 it is
    s^2 (1 + phi) / (1 - phi), the variance that a sum of n values grows with (n sigma_LR^2).
    Only differences are used, so a level shift touches a few terms: the first differences
    d_t have variance 2 s^2 (1 - phi) and lag-1 correlation rho = -(1 - phi) / 2, so
    phi = 1 + 2 rho and sigma_LR^2 = var(d) (1 + phi) / (2 (1 - phi)^2). Scales are MAD-based;
    rho is the Gnanadesikan-Kettenring robust correlation of (d_t, d_{t-1}) from the scales of
    their sum (x_t - x_{t-2}) and difference (x_t - 2 x_{t-1} + x_{t-2}). phi is clipped to
    [0, ``phi_max``] (negative dependence taken as none, which overstates sigma; above 0.9
    the AR(1) correction is too unsure to use: common practice).

    References
    ----------
    Hamilton 1994, Time Series Analysis, Princeton, sec. 7.2 (long-run variance, AR(1));
    Gnanadesikan & Kettenring 1972, Biometrics 28(1):81 (robust correlation from scales);
    Bagshaw & Johnson 1975, Technometrics 17(1):73 (CUSUM under serial correlation: the
    long-run variance sets the run length; from memory).
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    if len(x) < 5:
        return float("nan"), float("nan")
    d = np.diff(x)
    vd = _mad_var(d)
    plus, minus = _mad_var(d[1:] + d[:-1]), _mad_var(d[1:] - d[:-1])
    rho = (plus - minus) / (plus + minus) if plus + minus > 0 else 0.0
    phi = float(np.clip(1 + 2 * rho, 0.0, phi_max))
    return math.sqrt(vd * (1 + phi) / 2) / (1 - phi), phi


def energy_band(energy_kwh: float, rel_sigma: float, abs_sigma_kwh: float = 0.0
                ) -> tuple[float, float]:
    """95 % band of an energy from a relative model error and an absolute noise term."""
    s = math.hypot(abs(energy_kwh) * rel_sigma, abs_sigma_kwh)
    return energy_kwh - Z95 * s, energy_kwh + Z95 * s


def local_level(x: pd.Series, first_day: pd.Timestamp, last_day: pd.Timestamp,
                half_days: int = 14) -> tuple[float, float]:
    """An inverter's local performance level around an event and its relative standard error.

    ``x``: a daily level (measured over expected, as :func:`daily_pi`) on site-local days. The
    level is the median of the ``half_days`` days on either side of the event's days
    ``[first_day, last_day]`` (those left out). Its relative standard error, as the event's
    days' level is judged by it, is that of the mean log level of the event's days less the
    median of the reference days: s sqrt(g(n_event)/n_event + (pi/2) g(n_ref)/n_ref), where
    s is the plain standard deviation of the reference days' log level (the event's days
    draw their level from the spread around them, the bad days of heavy tails included),
    g the AR(1) factor of a mean of consecutive days (:func:`ar1_mean_factor`, phi from
    :func:`long_run_sigma` over the days outside the event) and pi/2 the median's variance
    over the mean's (normal values); never under the robust long-run scale
    sigma_LR sqrt(1/n_event + 1/n_ref), nor under ``MODEL_FLOOR``. With fewer than 5
    reference days: NaN and that scale (or the floor).

    References
    ----------
    Hamilton 1994, Time Series Analysis, sec. 7.2 (variance of a mean of autocorrelated
    values); Kendall & Stuart 1977, The Advanced Theory of Statistics, vol. 1 (large-sample
    variance of the median, pi sigma^2 / 2n for the normal; from memory); the local
    reference level is common practice (from memory).
    """
    x = x.where(x > 0)
    a, b = pd.Timestamp(first_day), pd.Timestamp(last_day)
    near = ((x.index >= a - pd.Timedelta(days=half_days)) & (x.index < a)) | (
        (x.index > b) & (x.index <= b + pd.Timedelta(days=half_days)))
    ref = x[near].dropna()
    sig, phi = long_run_sigma(np.log(x[(x.index < a) | (x.index > b)]).to_numpy())
    if len(ref) < 5 or not math.isfinite(sig):
        return float("nan"), max(MODEL_FLOOR, sig if math.isfinite(sig) else 0.0)
    n_ev, n_ref = max(1, int(((x.index >= a) & (x.index <= b)).sum())), len(ref)
    s = float(np.std(np.log(ref.to_numpy()), ddof=1))
    rel = s * math.sqrt(ar1_mean_factor(n_ev, phi) / n_ev
                        + math.pi / 2 * ar1_mean_factor(n_ref, phi) / n_ref)
    return float(np.median(ref)), max(MODEL_FLOOR, rel, sig * math.sqrt(1 / n_ev + 1 / n_ref))


def ar1_mean_factor(n: int, phi: float) -> float:
    """Variance of the mean of ``n`` consecutive values of an AR(1) series with lag-1
    autocorrelation ``phi`` over that of ``n`` independent ones:
    1 + 2 sum_{k=1}^{n-1} (1 - k/n) phi^k (tends to (1 + phi)/(1 - phi) for large n).

    References
    ----------
    Hamilton 1994, Time Series Analysis, Princeton, eq. 7.2.6 (variance of the sample mean
    of a covariance-stationary process; from memory).
    """
    if n <= 1 or not phi > 0:
        return 1.0
    k = np.arange(1, n)
    return float(1 + 2 * np.sum((1 - k / n) * phi ** k))


# --------------------------------------------------------------------------------------------
# change points


@dataclass(frozen=True)
class Segment:
    start: int  # position in the series, inclusive
    stop: int  # exclusive
    mean: float


def _best_arc(x: np.ndarray, min_size: int) -> tuple[int, int, float, int]:
    """The stretch ``x[i:j]`` whose mean differs most from the rest (pooled two-sample t).

    Returns ``(i, j, t, pairs searched)``; a stretch touching either end is a single change.
    """
    n = len(x)
    c = np.concatenate([[0.0], np.cumsum(x)])
    c2 = np.concatenate([[0.0], np.cumsum(x * x)])
    i = np.arange(n + 1)[:, None]
    j = np.arange(n + 1)[None, :]
    k = (j - i).astype(float)
    ok = (k >= min_size) & (n - k >= min_size)
    if not ok.any():
        return -1, -1, 0.0, 0
    with np.errstate(invalid="ignore", divide="ignore"):
        s_in = c[j] - c[i]
        q_in = c2[j] - c2[i]
        m_in = s_in / k
        m_out = (c[-1] - s_in) / (n - k)
        ss = (q_in - k * m_in**2) + ((c2[-1] - q_in) - (n - k) * m_out**2)
        var = np.maximum(ss / max(n - 2, 1), 1e-300)
        t = np.abs(m_in - m_out) / np.sqrt(var * (1 / k + 1 / (n - k)))
    t = np.where(ok, t, -1.0)
    flat = int(np.argmax(t))
    bi, bj = divmod(flat, n + 1)
    return bi, bj, float(t[bi, bj]), int(ok.sum())


def change_points(x: np.ndarray, alpha: float = 1e-3, min_size: int = 5,
                  max_depth: int = 10) -> list[Segment]:
    """Segments of constant mean, by circular binary segmentation with a significance test.

    Each step scans every stretch ``x[i:j]`` against the rest of the segment (one change at
    an end, or a change and a change back), takes the largest two-sample t statistic and keeps
    the split when its Bonferroni-corrected p-value over all stretches searched is below
    ``alpha`` (conservative: the false-alarm probability per test is at most ``alpha``).
    Segments are searched again until no split is significant. NaN must be dropped first.

    References
    ----------
    Olshen, Venkatraman, Lucito & Wigler 2004, "Circular binary segmentation for the
    analysis of array-based DNA copy number data", Biostatistics 5(4):557 (from memory);
    Scott & Knott 1974 (Biometrics 30:507), binary segmentation.
    """
    x = np.asarray(x, dtype=float)
    out: list[Segment] = []

    def rec(lo: int, hi: int, depth: int) -> None:
        seg = x[lo:hi]
        if depth < max_depth and len(seg) >= 2 * min_size:
            i, j, t, m = _best_arc(seg, min_size)
            if m:
                p = min(1.0, 2 * stats.t.sf(t, len(seg) - 2) * m)
                if p < alpha:
                    for a, b in ((0, i), (i, j), (j, len(seg))):
                        if b > a:
                            rec(lo + a, lo + b, depth + 1)
                    return
        out.append(Segment(lo, hi, float(np.mean(seg))))

    if len(x):
        rec(0, len(x), 0)
    return out


def window_change(x: pd.Series, d0: pd.Timestamp, d1: pd.Timestamp, min_n: int = 3,
                  min_span_days: int = 0, skip: list[tuple[pd.Timestamp, pd.Timestamp]] = ()
                  ) -> tuple[float, np.ndarray, np.ndarray] | None:
    """Median of ``x`` (daily) in [d0, d1) less its median over as many days on either side
    (at least ``min_span_days``), leaving out the windows ``skip`` (other segments off the
    usual level); None when either side has fewer than ``min_n`` values."""
    span = max(d1 - d0, pd.Timedelta(days=min_span_days))
    x = x.dropna()
    for a, b in skip:
        if (a, b) != (d0, d1):
            x = x[(x.index < a) | (x.index >= b)]
    inside = x[(x.index >= d0) & (x.index < d1)].to_numpy()
    around = x[((x.index >= d0 - span) & (x.index < d0))
               | ((x.index >= d1) & (x.index < d1 + span))].to_numpy()
    if len(inside) < min_n or len(around) < min_n:
        return None
    return float(np.median(inside) - np.median(around)), inside, around


def runs(mask: np.ndarray) -> list[tuple[int, int]]:
    """(start, stop) positions of the runs of True in a boolean array (stop exclusive)."""
    m = np.asarray(mask, dtype=bool)
    if not m.any():
        return []
    d = np.diff(np.concatenate([[0], m.view(np.int8), [0]]))
    return list(zip(np.flatnonzero(d == 1).tolist(), np.flatnonzero(d == -1).tolist(),
                    strict=True))


def row_median(x: np.ndarray) -> np.ndarray:
    """Median of each row of ``x`` (2-D) with NaN left out, NaN where a row has none: the
    numbers of ``np.nanmedian(x, axis=1)`` (the two middle values' sum halved), without its
    masked-array path, which warns once per empty row (each night's interval)."""
    s = np.sort(x, axis=1)  # NaN last
    n = (~np.isnan(s)).sum(axis=1)
    if s.shape[1] == 0:
        return np.full(len(s), np.nan)
    rows = np.arange(len(s))
    hi = np.minimum(n // 2, s.shape[1] - 1)
    lo = np.where(n % 2 == 1, hi, np.maximum(hi - 1, 0))
    with np.errstate(invalid="ignore"):
        return np.where(n > 0, (s[rows, lo] + s[rows, hi]) / 2.0, np.nan)


def day_rows(days: np.ndarray, mask: np.ndarray) -> list[tuple[Any, np.ndarray]]:
    """Each day of ``days`` (one per interval) with a True in ``mask``, in order, with the
    positions of all its intervals (ascending): what ``np.unique(days[mask])`` and
    ``np.flatnonzero(days == day)`` give, without a pass over every interval per day."""
    order = np.argsort(days, kind="stable")
    ordered = days[order]
    first = np.flatnonzero(np.concatenate([[True], ordered[1:] != ordered[:-1]]))
    bounds = np.append(first, len(days))
    return [(ordered[a], rows) for a, b in zip(bounds[:-1], bounds[1:], strict=True)
            if mask[rows := order[a:b]].any()]


def mann_kendall_slope(y: np.ndarray, x: np.ndarray) -> dict[str, float]:
    """Theil-Sen slope with its 95 % interval and Kendall's tau test of a monotone trend.

    References
    ----------
    Sen 1968 (JASA 63:1379); Theil 1950; Kendall 1938 (all from memory). scipy.stats.
    """
    ok = np.isfinite(y) & np.isfinite(x)
    y, x = y[ok], x[ok]
    if len(y) < 4 or np.ptp(x) == 0:
        return {"slope": float("nan"), "low": float("nan"), "high": float("nan"),
                "intercept": float("nan"), "p_value": 1.0, "n": int(len(y))}
    slope, intercept, low, high = stats.theilslopes(y, x, alpha=0.95)
    tau = stats.kendalltau(x, y)
    return {"slope": float(slope), "low": float(low), "high": float(high),
            "intercept": float(intercept), "p_value": float(tau.pvalue), "n": int(len(y))}


def ratio_noise(w: Wide, valid: pd.DataFrame) -> tuple[float, float]:
    """Interval-scale noise of measured/expected: (step noise, level spread), robust.

    The step noise is the robust scale of consecutive differences of the ratio (measurement
    noise and fast model error); the level spread is 1.4826 · MAD of the ratio itself.
    """
    r = (w.measured / w.expected).where(valid)
    step = float(np.nanmedian([robust_sigma(r[c].dropna().to_numpy()) for c in r]))
    dev = r - r.median()
    spread = float(1.4826 * np.nanmedian(np.abs(dev.to_numpy())))
    return step, spread


def plateaus(power: np.ndarray, ref: np.ndarray, tol: float, margin: float,
             min_len: int) -> np.ndarray:
    """Intervals where ``power`` holds a flat level while ``ref`` is clearly above it.

    Flat: the relative change to the previous or next interval is at most ``tol``. Above:
    ``ref >= power * (1 + margin)``. Only runs of at least ``min_len`` such intervals count.
    """
    p = np.asarray(power, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.abs(np.diff(p)) / np.maximum(np.maximum(p[1:], p[:-1]), 1e-9)
    ok = d <= tol
    flat = np.zeros(len(p), dtype=bool)
    flat[1:] |= ok
    flat[:-1] |= ok
    with np.errstate(invalid="ignore"):
        cand = flat & (np.asarray(ref) >= p * (1 + margin)) & (p > 0)
    out = np.zeros(len(p), dtype=bool)
    for a, b in runs(cand):
        if b - a >= min_len:
            out[a:b] = True
    return out


@dataclass
class Footprint:
    """Where a finding explains part of the shortfall, for the attribution.

    Rows ``lo:hi`` of the wide index, the inverter columns ``cols``; either ``mask`` (the
    whole shortfall of those intervals is this cause) or ``factor`` (this cause removes that
    share of the expected power, a multiplicative loss).
    """

    event: Event
    lo: int
    hi: int
    cols: list[str]
    mask: np.ndarray | None = None
    factor: np.ndarray | None = None
    factor_rel_sigma: float = 0.0  # relative standard error of ``factor`` [-]


def shares_put_back(w: Wide, prints: list[Footprint]) -> pd.DataFrame:
    """Measured power with the shares of the footprints ``prints`` (lost strings, a stalled
    row's plane: a ``factor`` each) put back: what the inverters would have delivered
    without those faults."""
    m = w.measured.copy()
    for fp in prints:
        for j, c in enumerate(fp.cols):
            pos = m.columns.get_loc(c)
            m.iloc[fp.lo:fp.hi, pos] = m.iloc[fp.lo:fp.hi, pos].to_numpy() / (
                1 - fp.factor[:, j])
    return m


def clearsky_poa(w: Wide, latitude: float, longitude: float, altitude: float,
                 planes: dict[str, list[tuple[float, float, float]]]) -> pd.DataFrame:
    """Clear-sky plane-of-array irradiance [W/m^2] per named plane group.

    Ineichen & Perez 2002 clear sky (GHI, DNI, DHI) with pvlib's monthly Linke turbidity table,
    transposed by Hay & Davies 1980 and summed over each group's planes with their weights;
    ``planes`` maps a name to ``[(surface_tilt, surface_azimuth, weight)]``. The sun position is
    that of the aligned rows (interval mid-points).

    References
    ----------
    Ineichen & Perez 2002 (Solar Energy 73(3):151); Remund et al. 2003 (Linke turbidity
    table); Hay & Davies 1980 (from memory).
    """
    zen_all = w.zenith.to_numpy(dtype=float)
    out = pd.DataFrame(0.0, index=w.index, columns=list(planes))
    # the sun's rows alone (at night every plane takes 0): each function is one of the instant
    up = np.flatnonzero(zen_all < 90)
    if not len(up):
        return out
    zen = zen_all[up]
    mid = w.index[up] + pd.to_timedelta(w.interval_s.to_numpy()[up] / 2, unit="s")
    am_rel = pvlib.atmosphere.get_relative_airmass(zen)
    am = pvlib.atmosphere.get_absolute_airmass(am_rel, pvlib.atmosphere.alt2pres(altitude))
    # the turbidity table is monthly (interpolated by day) and the extraterrestrial
    # irradiance a function of the day of year: both looked up once per (UTC) day
    day = mid.floor("D")
    first, inv = np.unique(day.asi8, return_index=True, return_inverse=True)[1:]
    days = pd.DatetimeIndex(day[first])
    tl = pvlib.clearsky.lookup_linke_turbidity(days, latitude, longitude).to_numpy()[inv]
    extra = pvlib.irradiance.get_extra_radiation(days).to_numpy()[inv]
    cs = pvlib.clearsky.ineichen(zen, am, tl, altitude, extra)
    ghi, dni, dhi = (np.nan_to_num(np.asarray(cs[k], dtype=float))
                     for k in ("ghi", "dni", "dhi"))
    azimuth = w.azimuth.to_numpy()[up]
    fixed: dict[tuple[float, float], np.ndarray] = {}  # a fixed plane shared by groups: once

    def transposed(tilt: Any, az: Any) -> np.ndarray:
        key = (float(tilt), float(az)) if np.ndim(tilt) == 0 and np.ndim(az) == 0 else None
        if key not in fixed:
            irr = pvlib.irradiance.get_total_irradiance(
                tilt if np.ndim(tilt) == 0 else np.asarray(tilt)[up],
                az if np.ndim(az) == 0 else np.asarray(az)[up], zen, azimuth, dni, ghi, dhi,
                dni_extra=extra, model="haydavies")
            poa = np.nan_to_num(np.asarray(irr["poa_global"], dtype=float))
            if key is None:
                return poa
            fixed[key] = poa
        return fixed[key]

    for name, parts in planes.items():
        total = np.zeros(len(up))
        for tilt, az, weight in parts:
            total += weight * transposed(tilt, az)
        out.iloc[up, out.columns.get_loc(name)] = total
    return out


def coarsen(w: Wide, *masks: pd.DataFrame, target_s: float = 900.0
            ) -> tuple[Wide | pd.DataFrame, ...]:
    """The series on a coarser grid (blocks of ``target_s`` seconds), for statistics that need
    no finer resolution: means of power, irradiance, temperature and sun angles, sums of
    ``interval_s`` and rain; a block is flagged if any interval is; of each of ``masks``
    (usable intervals, clear ones ...), true only if all its intervals are.
    Returns ``(wide, *masks)``, the input unchanged when its intervals are already that long."""
    step = float(np.median(w.interval_s))
    if step >= target_s:
        return (w, *masks)
    ns = w.index.as_unit("ns").asi8
    codes = ns // int(target_s * 1e9)
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]])
    index = w.index[starts]
    counts = np.diff(np.r_[starts, len(ns)])

    def mean(a: np.ndarray) -> np.ndarray:
        a = np.asarray(a, dtype=float)
        finite = np.isfinite(a)
        s = np.add.reduceat(np.where(finite, a, 0.0), starts, axis=0)
        n = np.add.reduceat(finite.astype(float), starts, axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(n > 0, s / n, np.nan)

    def frame(f: pd.DataFrame, how: str = "mean") -> pd.DataFrame:
        a = f.to_numpy()
        if how == "mean":
            v = mean(a)
        elif how == "all":
            v = np.add.reduceat(a.astype(int), starts, axis=0) == counts[:, None]
        else:
            v = np.add.reduceat(a.astype(int), starts, axis=0) > 0
        return pd.DataFrame(v, index=index, columns=f.columns)

    def series(x: pd.Series, how: str = "mean") -> pd.Series:
        a = x.to_numpy(dtype=float)
        v = mean(a) if how == "mean" else np.add.reduceat(np.nan_to_num(a), starts)
        return pd.Series(v, index=index)

    wc = Wide(
        measured=frame(w.measured), expected=frame(w.expected), potential=frame(w.potential),
        expected_modelled=frame(w.expected_modelled),
        potential_modelled=frame(w.potential_modelled),
        poa=frame(w.poa), poa_modelled=frame(w.poa_modelled), temp_cell=frame(w.temp_cell),
        flagged=frame(w.flagged, "any"), from_sensor=frame(w.from_sensor, "all"),
        translated=frame(w.translated, "all"),
        interval_s=series(w.interval_s, "sum"), ghi=series(w.ghi),
        clearsky_ghi=series(w.clearsky_ghi), zenith=series(w.zenith),
        azimuth=series(w.azimuth), rain=series(w.rain, "sum"),
        day=pd.Series(w.day.to_numpy()[starts], index=index), ac_w=w.ac_w,
        export_limit_w=w.export_limit_w, tz=w.tz)
    return (wc, *(frame(m, "all") for m in masks))


def despike(x: np.ndarray, window: int = 5, z: float = 5.0) -> np.ndarray:
    """Isolated outliers replaced by the running median of ``window`` values.

    A value more than ``z`` robust standard deviations (:func:`robust_sigma`) from the running
    median is an isolated spike (a day with an outage, a cloud front); a step that lasts at
    least half the window is kept, so change points survive. Hampel's identifier, from memory
    (Hampel 1974, JASA 69:383).
    """
    x = np.asarray(x, dtype=float)
    if len(x) < window:
        return x
    med = pd.Series(x).rolling(window, center=True, min_periods=1).median().to_numpy()
    s = robust_sigma(x)
    if not s > 0:
        return x
    return np.where(np.abs(x - med) > z * s, med, x)


def day_light(w: Wide, usable: pd.DataFrame) -> pd.DataFrame:
    """The day's light per inverter: the log of the mean plane irradiance [W/m^2] over the
    day's ``usable`` intervals (NaN on a day without one)."""
    return np.log(w.poa.where(usable & (w.poa > 0)).groupby(w.day.to_numpy()).mean())


def light_adjusted(x: np.ndarray, light: np.ndarray, fit: slice | np.ndarray
                   ) -> tuple[np.ndarray, float, np.ndarray]:
    """The daily log ratios ``x`` less what the day's light explains on the healthy days
    ``fit`` (a slice or a mask of the days); the variance of that slope; the light as the fit
    takes it.

    The model's error is not the same on every day: on dull, overcast days (a low mean plane
    irradiance over the usable intervals, :func:`day_light`) real modules lose efficiency at
    low light and to a bluer spectrum that the model may not follow, and the sky's diffuse
    light is transposed worst. Without siblings to divide it out, a run of such days moves an
    inverter's ratio like a fault that scales the power whatever the light (a lost string, a
    sensor reading off). So the ratio's dependence on ``light`` (the log of the day's mean
    plane irradiance) is fitted by least squares on the days ``fit`` and removed from every
    day, centred on their mean light (their level is kept). The fit is not carried beyond the
    light those days saw: a day dimmer (brighter) than all of them is taken at their dimmest
    (brightest); days without a light value are left as they are (their light NaN).

    Ordinary least squares and the slope's variance: Draper & Smith 1998, Applied Regression
    Analysis, 3rd ed., ch. 1 (from memory).
    """
    lr, xr = light[fit], x[fit]
    ok = np.isfinite(lr) & np.isfinite(xr)
    if ok.sum() < 3 or np.ptp(lr[ok]) == 0:
        return x, 0.0, light
    c = lr[ok] - lr[ok].mean()
    slope = float(np.sum(c * (xr[ok] - xr[ok].mean())) / np.sum(c * c))
    resid = xr[ok] - xr[ok].mean() - slope * c
    slope_var = float(np.sum(resid ** 2) / (ok.sum() - 2) / np.sum(c * c))
    seen = np.clip(light, lr[ok].min(), lr[ok].max())
    return x - np.where(np.isfinite(seen), slope * (seen - lr[ok].mean()), 0.0), slope_var, seen


def segmented(q: pd.Series, alpha: float, min_days: int
              ) -> tuple[np.ndarray, list[Segment], Segment] | None:
    """A daily series ``q`` (no NaN) cut about its usual level: its values with isolated
    outliers removed (:func:`despike`), their segments of constant mean
    (:func:`change_points` at ``alpha``, at least ``min_days`` long) and the reference among
    them, the longest (the level most days share). None with fewer than 4 ``min_days``
    values: too few to tell a window from the level around it."""
    if len(q) < 4 * min_days:
        return None
    x = despike(q.to_numpy())
    segs = change_points(x, alpha=alpha, min_size=min_days)
    return x, segs, max(segs, key=lambda g: g.stop - g.start)
