"""Single-axis trackers: rows stalled at one angle, rows out of step, and wind stow.

A tracker's rows turn through the day, so the plane-of-array irradiance of a row that has
stopped turning (a drive, controller or supply fault) or that turns by a constant offset (a
mis-set inclinometer or set-point) has a day shape of its own against the tracked plane: a
stalled row gets its most light when the designed rotation passes its angle and little in
the morning or evening on the far side. The detector compares the shape of each day's power
with the tracked expectation and with the expectation of the rows held at each candidate
angle (or turned by each candidate offset), the shapes from the weather of the day (measured
GHI split as in the model, :func:`perfcheck.physics.decompose`, transposed by Hay & Davies;
:func:`perfcheck.physics.poa_at_rotation`; for bifacial modules the rear by the infinite-sheds
model at the bifaciality, as in the model: a row held away from the sun takes much of its
light on the rear).

The statistic (:func:`day_fits`, pure): y = ln(measured / expected) per usable interval of a
day, less the inverter's usual day shape (:func:`typical_shape`: the model's own errors have a
shape that persists from day to day); the tracked model is y = c, a candidate's y = c + ln(r),
r the candidate plane's irradiance over the tracked plane's. The best candidate's gain
ln(SSE_tracked / SSE_candidate) is judged against the same inverter's other days by its
robust z-score (median, MAD): intervals within a day are too correlated (clouds, model error)
for a test on their number, while days are many and mostly healthy. A day is a stall or
out-of-step day when the one-sided p-value is below ``[detect] alpha`` and the day's loss the
candidate explains exceeds the one-sided 1 - alpha quantile of the daily model error (a shape
alone, inside the model's error, is not reported). Consecutive such days of one kind (rows
held, or turned by an offset) make one event, with a single odd day between them, or between
one of them and a significant day of that kind whose loss alone is not material, its angle
within ``JOIN_DEG`` of the event's (:func:`_group`); the event is kept only where its loss
exceeds the one-sided 1 - alpha quantile of the model's error of the level over its days (a
day's error for a run of one day, far less over weeks:
:func:`perfcheck.detect.common.local_level`, autocorrelation included), and where the power
measured over it falls short of the inverter's usual performance index by half the shape's
loss or more, within its error (a fault of the rows costs energy; a shape that costs none is
the sky's or the model's); the days on either side, and overcast days inside, join it while
the event's angle fits them better than tracking; its onset and end are placed by the split
that fits best (:func:`_split`) within the run's edge day and the nearest day beyond it with
usable intervals (an overcast day between can tell neither: a row that stalled on the
afternoon before it is found there). Where the plant has other tracker inverters, a day on
which more than half of them show a significant shape (any candidate) is taken as the sky's
or the model's, not the rows' (rows out of step differ from their neighbours; a plant-wide
stall is therefore found from the angle channel only), and an
event is reported when its most significant day of its own (not such a shared day, and one
on which a sibling was tested too) is significant over all the inverter's days tested (its
p-value times their number below alpha, Bonferroni). An inverter with no sibling, or a run on
none of whose days a sibling was tested (too few usable intervals there: low winter sun,
snow), has no such reference, and its
day gains have a tail far heavier than the normal one: its event is reported when the run's
days rank so high among its days, so persistently, that chance would place them there with
probability below alpha (:func:`run_p_value`). Either way an event is also reported when the
angle channel shows it. Where a ``tracker_angle`` channel is logged (the rows of the first
tracker array), a day on which it stayed within the pointing tolerance while the designed
rotation swept more than ``MIN_SWEEP_DEG`` is a stall day of those rows at the channel's
angle, a day on which it followed the design by a constant offset beyond the tolerance is an
out-of-step day, and a day on which it followed the design within the tolerance is no stall
or out-of-step day of that inverter, whatever the power's shape.

The energy is a share of the expected power (ledger class ``share``): 1 - r of the event's
angle, interval by interval, r here the model's own effective irradiance of the held (or
turned) plane over the tracked one (its transposition and incidence-angle losses: the expected
power the share scales is the model's, and a held row takes its beam at angles the tracked
rows never see); for rows out of step, whose loss is mostly a level, scaled to the shortfall
measured against the inverter's usual performance index. Its band adds to the model error
the share's error as the usable intervals check it: its relative difference from the shortfall
measured there and that shortfall's own error (the model's error of the level over the
event's days, autocorrelation included: :func:`perfcheck.detect.common.local_level`), both
applied to the whole energy, the intervals not checked (low sun, clipped) included; and the
share of the onset and end days left outside the event.

Wind stow: rows laid at their stow angle (``stow_angle_deg``, flat by default) while the wind
is at or above the tracker array's ``stow_wind_speed_ms`` are designed behaviour. The limit is
the site file's; where it states none, it is inferred from the data (:func:`inferred_limit`).
The expected series of those intervals is replaced by the stow plane's (the stowed potential,
at most the expected) before any fault detector runs, and the energy stow keeps out is a
``wind_stow`` event of ledger class ``design``: shown, never a loss, so no fault detector can
call it a fault.

References
----------
Marion & Dobos 2013 (NREL/TP-6A20-58891), the rotation and plane of a single-axis tracker;
Maxwell 1987 (DISC, SERI/TR-215-3087); Hay & Davies 1980; Mikofski et al. 2019 (IEEE 46th
PVSC, 1282-1287), the rear of a row by infinite sheds; robust z-scores from
the median and MAD: Hampel 1974 (JASA 69:383) and Iglewicz & Hoaglin 1993, How to Detect and
Handle Outliers, ASQC (from memory).
Pointing accuracy of about +-2 deg and stow of horizontal single-axis trackers at a stated
wind speed: manufacturers' data sheets (common practice, no single published source).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from perfcheck import physics as ph
from perfcheck.detect.common import (
    Event,
    Footprint,
    Wide,
    energy_band,
    local_level,
    scope_of,
)
from perfcheck.detect.sensor import CONFIRM_ALPHA
from perfcheck.lazy import PVLIB_WITH_INIT, lazy_module, lazy_package
from perfcheck.site import Array, Model, Site

pvlib = lazy_package("pvlib", PVLIB_WITH_INIT)
special = lazy_module("scipy.special")
stats = lazy_module("scipy.stats")

STEP_DEG = 2.0  # grid of the candidate angles and offsets: about the pointing accuracy
# days whose best angles differ by up to this much are one stall: a day that is partly
# tracked, partly stalled fits an angle between the two (common practice, no source)
JOIN_DEG = 10.0
ANGLE_TOLERANCE_DEG = 2.0  # a tracker points within about +-2 deg (common practice)
MAX_OFFSET_DEG = 30.0  # largest offset searched for rows out of step
MIN_SWEEP_DEG = 20.0  # a day on which the design turns less says nothing about a stall
SHAPE_WINDOW_DAYS = 61  # the usual day shape: running median over two months
MIN_TRACKED_WM2 = 50.0  # the shape is judged where the tracked plane gets at least this much
MIN_DAY_INTERVALS = 10  # a day with fewer usable intervals is not tested
# the gains' scale is taken as at least this: a fit better by a few per cent is within the
# resolution of the shapes, even where the model is exact (common practice, no source)
MIN_GAIN_SCALE = 0.05
METHOD_STALL = ("day shape of the power against the tracked plane and the plane held at each "
                "angle (fit gain against the inverter's other days, robust z)")
METHOD_STEP = ("day shape of the power against the tracked plane and the plane turned by each "
               "offset (fit gain against the inverter's other days, robust z)")
METHOD_STOW = "rows at their stow angle while the wind was at or above the stow limit"


# --------------------------------------------------------------------------------------------
# the plant's trackers and the sky


def tracker_arrays(site: Site) -> dict[str, Array]:
    """Per inverter whose arrays all sit on single-axis trackers: its first array."""
    return {inv.id: inv.arrays[0] for inv in site.inverters
            if inv.arrays and all(a.tracker is not None for a in inv.arrays)}


@dataclass(frozen=True)
class Sky:
    """Sun and irradiance components per interval of the wide index [deg, W/m^2]."""

    zenith: np.ndarray
    azimuth: np.ndarray
    ghi: np.ndarray
    dni: np.ndarray
    dhi: np.ndarray
    dni_extra: np.ndarray


def sky(w: Wide) -> Sky:
    """The day's sky from the logged GHI (split by :func:`perfcheck.physics.decompose`), else
    from the clear-sky GHI."""
    ghi = w.ghi if w.ghi.notna().sum() >= 0.5 * (w.zenith < 85).sum() else w.clearsky_ghi
    ghi = ghi.clip(lower=0.0).fillna(0.0)
    parts = ph.decompose(ghi, w.zenith)
    extra = pvlib.irradiance.get_extra_radiation(w.index).to_numpy(dtype=float)
    return Sky(w.zenith.to_numpy(dtype=float), w.azimuth.to_numpy(dtype=float),
               ghi.to_numpy(dtype=float), parts["dni"].fillna(0.0).to_numpy(dtype=float),
               parts["dhi"].fillna(0.0).to_numpy(dtype=float), extra)


def designed_rotation(w: Wide, array: Array) -> np.ndarray:
    """The rotation the design turns the rows to [deg] (flat at night)."""
    t = array.tracker
    solpos = pd.DataFrame({"apparent_zenith": w.zenith, "azimuth": w.azimuth}, index=w.index)
    return ph.singleaxis(solpos, t.axis_tilt_deg, t.axis_azimuth_deg, t.max_angle_deg,
                         t.backtrack, array.gcr)["tracker_theta"].to_numpy(dtype=float)


def plane_poa(rotation: float | np.ndarray, array: Array, s: Sky,
              chain: Model | None = None) -> np.ndarray:
    """Irradiance of the array's rows at ``rotation`` [W/m^2]: the front's global irradiance
    (Hay & Davies), or with the model's settings ``chain`` the front's effective irradiance as
    the model takes it (its transposition, horizon and incidence-angle losses:
    :func:`perfcheck.physics.poa_components`), and for bifacial modules the rear's at the
    bifaciality, as in the model's effective irradiance
    (:func:`perfcheck.physics.bifacial_effective`). A row held facing away from the sun takes
    much of its light on the rear: without it the shape of a stall is too deep; and it takes
    its beam at angles of incidence the tracked rows never see, where the glass reflects much
    of it: without the model's losses there the stall's energy is too small."""
    t = array.tracker
    if chain is None:
        front = ph.poa_at_rotation(rotation, t.axis_tilt_deg, t.axis_azimuth_deg, s.zenith,
                                   s.azimuth, s.ghi, s.dni, s.dhi, s.dni_extra, array.albedo)
    else:
        front = _effective_front(rotation, array, s, chain)
    if array.bifacial is None:
        return front
    plane = pvlib.tracking.calc_surface_orientation(rotation, t.axis_tilt_deg,
                                                    t.axis_azimuth_deg)
    up = s.zenith < 90.0
    # the rear at daylight intervals only (the night's is dropped below); the model works
    # interval by interval, so each one's value is the same (two or more: a single interval
    # would sum the rows' view factors in another order)
    at = np.flatnonzero(up) if up.sum() >= 2 else np.arange(len(up))
    tilt, azimuth = (np.asarray(plane[k], dtype=float) for k in ("surface_tilt",
                                                                 "surface_azimuth"))
    if tilt.ndim and tilt.size == len(up):  # one plane per interval (else one for all)
        tilt, azimuth = tilt[at], azimuth[at]
    rear = np.zeros(len(up))
    solpos = pd.DataFrame({"apparent_zenith": np.where(up, s.zenith, 90.0)[at],
                           "azimuth": s.azimuth[at]})
    rear[at] = ph.poa_rear(tilt, azimuth, solpos, pd.Series(s.ghi[at]), pd.Series(s.dhi[at]),
                           pd.Series(s.dni[at]), array.albedo, array.gcr,
                           array.bifacial.row_height_m, array.bifacial.row_pitch_m
                           ).to_numpy(dtype=float)
    both = ph.bifacial_effective(front, rear, array.bifacial.bifaciality)
    return np.where(up, both, 0.0)


def _effective_front(rotation: float | np.ndarray, array: Array, s: Sky,
                     chain: Model) -> np.ndarray:
    """The front's effective irradiance of the rows at ``rotation`` [W/m^2], by the model's
    chain (:func:`perfcheck.physics.poa_components`, air mass by Kasten & Young 1989 as in
    :func:`perfcheck.physics.atmosphere`); 0 where the sun is down."""
    t = array.tracker
    plane = pvlib.tracking.calc_surface_orientation(rotation, t.axis_tilt_deg,
                                                    t.axis_azimuth_deg)
    up = s.zenith < 90.0
    index = pd.RangeIndex(len(up))

    def series(x: np.ndarray) -> pd.Series:
        return pd.Series(np.asarray(x, dtype=float), index=index)

    # one plane for all intervals (rows held at an angle) or one per interval
    tilt, azimuth = (float(np.ravel(plane[k])[0]) if np.size(plane[k]) == 1
                     else series(plane[k]) for k in ("surface_tilt", "surface_azimuth"))
    zenith = np.where(up, s.zenith, 90.0)
    solpos = pd.DataFrame({"apparent_zenith": zenith, "azimuth": s.azimuth,
                           "apparent_elevation": 90.0 - zenith}, index=index)
    airmass = pvlib.atmosphere.get_relative_airmass(solpos["apparent_zenith"],
                                                    "kastenyoung1989")
    out = ph.poa_components(tilt, azimuth, solpos, series(s.ghi), series(s.dni),
                            series(s.dhi), series(s.dni_extra), airmass, array.albedo,
                            array.horizon, chain.transposition, chain.iam)
    return np.where(up, out["poa_effective"].fillna(0.0).to_numpy(dtype=float), 0.0)


def log_ratio(poa: np.ndarray, tracked: np.ndarray) -> np.ndarray:
    """ln(poa / tracked) where the tracked plane gets at least MIN_TRACKED_WM2, else NaN."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(tracked >= MIN_TRACKED_WM2, np.log(np.maximum(poa, 1e-3) / tracked),
                        np.nan)


# --------------------------------------------------------------------------------------------
# the statistic


@dataclass(frozen=True)
class DayFits:
    """Per day: intervals used, residual sum of squares of the tracked model and of the best
    candidate, the best candidate's index, the improvement ln(SSE0/SSE1), its one-sided
    p-value against the inverter's other days, and every candidate's residual sum of squares
    (days x candidates)."""

    n: np.ndarray
    sse0: np.ndarray
    sse: np.ndarray
    best: np.ndarray
    gain: np.ndarray
    p_value: np.ndarray
    sse_all: np.ndarray


def day_fits(y: np.ndarray, logr: np.ndarray, codes: np.ndarray, n_days: int) -> DayFits:
    """Tracked model (a constant per day) against each candidate shape, day by day.

    The gain of a day is ln(SSE0 / SSE1), SSE1 that of its best candidate (the tracked model
    counts as a candidate, so the gain is at least 0); its p-value is
    the one-sided normal tail of its robust z-score among the days with at least
    ``MIN_DAY_INTERVALS`` usable intervals (median and 1.4826 MAD: most days are healthy,
    and the model's errors and the clouds make the healthy days' gains what they are).

    Parameters
    ----------
    y : ln(measured / expected) per interval about the usual day shape, NaN where not usable.
    logr : (candidates x intervals) ln of the candidate plane's irradiance over the tracked.
    codes : day number of each interval (0 .. n_days - 1).
    """
    ok = np.isfinite(y) & np.isfinite(logr).all(axis=0)
    c, yy = codes[ok], y[ok]
    n = np.bincount(c, minlength=n_days).astype(float)

    def sse(z: np.ndarray) -> np.ndarray:
        s1 = np.bincount(c, z, minlength=n_days)
        s2 = np.bincount(c, z * z, minlength=n_days)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.maximum(s2 - np.where(n > 0, s1 * s1 / n, 0.0), 0.0)

    sse0 = sse(yy)
    sse_all = np.stack([sse(yy - lr[ok]) for lr in logr], axis=1)
    best = np.argmin(sse_all, axis=1)
    sse1 = sse_all[np.arange(n_days), best]
    with np.errstate(invalid="ignore", divide="ignore"):
        gain = np.where(n >= MIN_DAY_INTERVALS,
                        np.log(sse0 / np.clip(sse1, 1e-12, np.maximum(sse0, 1e-12))), np.nan)
    g = gain[np.isfinite(gain)]
    if len(g) < 5:
        return DayFits(n, sse0, sse1, best, gain, np.ones(n_days), sse_all)
    med = float(np.median(g))
    scale = max(1.4826 * float(np.median(np.abs(g - med))), MIN_GAIN_SCALE)
    p = np.where(np.isfinite(gain), stats.norm.sf((gain - med) / scale), 1.0)
    return DayFits(n, sse0, sse1, best, gain, p, sse_all)


def run_p_value(gain: np.ndarray, seeds: np.ndarray, span_days: int) -> float:
    """False-alarm probability of a run of days of one inverter judged on its own.

    With no sibling inverter the day gains have no reference for the sky's and the model's
    shapes, and their tail is far heavier than a normal one: a z-score's p-value is not what
    it says. A stall holds its angle day after day, while the sky's shapes come and go: the
    test is the persistence of high-ranked days. Under the null the days' gains are
    exchangeable, so the chance that a window of ``span_days`` days holds at least m of the
    top k days of n is the hypergeometric tail; for each m, the run's m best ``seeds`` (its
    significant days) and k the rank of the m-th (1 = highest gain): a stall's last,
    partly stalled day ranks low and must not hide the days before it. The least tail is
    taken, and Bonferroni over the windows that could have been picked (n start days times
    ``span_days`` lengths) and over the counts m from 2 to ``span_days`` bounds the false
    alarms at ``alpha`` per inverter and period (m = 1 is left out of the family: one day
    alone is never an event, its bound being at least k). Over a year at alpha = 1e-3, the
    three highest-ranked days in a row are enough (365 x 3 x 2 / C(365, 3) = 2.7e-4).
    Weather that lasts for days (snow lying on the modules) breaks the exchangeability: the
    bound holds for the days the usual day shape describes.

    Parameters
    ----------
    gain : ln(SSE0 / SSE1) per day, NaN where the day was not tested
    seeds : mask of the run's significant days
    span_days : calendar days from the run's first to its last

    References
    ----------
    Hypergeometric law of draws without replacement (Feller 1968, An Introduction to
    Probability Theory and Its Applications I, sec. II.6); a window's count of marked days as a
    scan statistic with a Bonferroni bound over windows: Glaz, Naus & Wallenstein 2001, Scan
    Statistics, ch. 1 (from memory).
    """
    ok = np.isfinite(gain)
    n = int(ok.sum())
    rank = stats.rankdata(-gain[ok], method="max")  # ties count against the run
    ks = np.sort(rank[seeds[ok]]).astype(int)  # the seeds' ranks, best first
    if len(ks) < 2:
        return 1.0  # one day alone: its tail times the windows is at least 1
    span = min(span_days, n)
    m = np.arange(2, len(ks) + 1)
    tail = stats.hypergeom.sf(m - 1, n, ks[1:], span)
    return min(1.0, n * span * max(1, span - 1) * float(np.min(tail)))


def typical_shape(y: np.ndarray, index: pd.DatetimeIndex, interval_s: float,
                  window_days: int = SHAPE_WINDOW_DAYS) -> np.ndarray:
    """The inverter's usual ln(measured / expected) at each time of day: the running median,
    over ``window_days`` days centred on each day, of the values at the same UTC time of day.

    The model's own error has a day shape (incidence-angle, spectral and thermal effects
    that it leaves out); it persists from day to day while a fault's shape comes and goes, so
    it is taken out before the shapes are compared. A median over twice the longest fault
    that should stand out, at least half of the window healthy (common practice, no source).
    """
    ns = index.as_unit("ns").asi8
    day = ns // 86_400_000_000_000
    slot = (ns - day * 86_400_000_000_000) // int(interval_s * 1e9)
    d0 = day - day.min()
    grid = np.full((int(d0.max()) + 1, int(slot.max()) + 1), np.nan)
    grid[d0, slot] = y
    ref = pd.DataFrame(grid).rolling(window_days, center=True, min_periods=7).median()
    return ref.to_numpy()[d0, slot]


# --------------------------------------------------------------------------------------------
# wind stow


def stow(w: Wide, site: Site, wind: pd.Series | None, s: Sky | None = None,
         alpha: float = 1e-3) -> tuple[Wide, list[Event], dict[int, pd.DataFrame]]:
    """The expected series with the wind stow in it, the ``wind_stow`` events (one per run of
    stow days, gaps up to a day) and the power each keeps out of the expected series.

    The stow limit is the array's ``stow_wind_speed_ms``; where none is stated it is inferred
    (:func:`inferred_limit`) and the events say so."""
    arrays = tracker_arrays(site)
    if not arrays or wind is None or wind.isna().all():
        return w, [], {}
    s = s or sky(w)
    wv = wind.reindex(w.index).to_numpy(dtype=float)
    theta = {inv: designed_rotation(w, a) for inv, a in arrays.items()}
    ratio = {}
    for inv, a in arrays.items():
        tracked = plane_poa(theta[inv], a, s)
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio[inv] = np.where(tracked > 1.0,
                                  plane_poa(a.tracker.stow_angle_deg, a, s) / tracked, 1.0)
    unstated = [inv for inv, a in arrays.items() if a.tracker.stow_wind_speed_ms is None]
    guess = inferred_limit(w, unstated, wv, ratio, alpha) if unstated else None
    limits = {inv: a.tracker.stow_wind_speed_ms or guess for inv, a in arrays.items()}
    limits = {inv: v for inv, v in limits.items() if v is not None}
    if not limits:
        return w, [], {}
    expected, potential = w.expected.copy(), w.potential.copy()
    kept = pd.DataFrame(0.0, index=w.index, columns=list(limits))
    stowed = {}
    for inv, limit in limits.items():
        on = (wv >= limit) & (s.zenith < 90)
        if site.model.poa_sensor_on_tracker:  # a sensor on a tracker stows with it
            on &= ~w.from_sensor[inv].to_numpy()
        pot = potential[inv].to_numpy() * np.where(on, ratio[inv], 1.0)
        exp_old = expected[inv].to_numpy()
        exp_new = np.where(on, np.fmin(exp_old, pot), exp_old)
        expected[inv], potential[inv] = exp_new, pot
        kept[inv] = np.nan_to_num(exp_old - exp_new)
        stowed[inv] = on & (kept[inv].to_numpy() != 0)
    w2 = dataclasses.replace(w, expected=expected, potential=potential)
    days = w.day.to_numpy()
    events: list[Event] = []
    design: dict[int, pd.DataFrame] = {}
    step = w.interval_s.to_numpy()
    # the plant when every inverter stows, else each tracker inverter on its own
    groups = ([("plant", list(limits))] if set(limits) == set(w.inverters)
              else [(scope_of(inv), [inv]) for inv in limits])
    for scope, invs in groups:
        any_stow = np.logical_or.reduce([stowed[inv] for inv in invs])
        for first, last in _day_runs(np.unique(days[any_stow]), gap_days=1):
            sel = (days >= first) & (days <= last)
            rows = np.flatnonzero(sel & any_stow)
            frame = kept[invs].where(pd.Series(sel, index=w.index), 0.0, axis=0)
            e_kwh = float((frame.to_numpy() * step[:, None]).sum() / 3.6e6)
            ev = Event(kind="wind_stow", scope=scope, start=w.index[rows[0]],
                       end=w.end_of(w.index[rows[-1]]), energy_loss_kwh=e_kwh,
                       energy_loss_kwh_low=e_kwh, energy_loss_kwh_high=e_kwh, method=METHOD_STOW,
                       evidence={"stow_intervals": int(len(rows)),
                                 "stow_hours": float(step[rows].sum() / 3600),
                                 "max_wind_speed_ms": float(np.nanmax(wv[rows])),
                                 "stow_wind_speed_ms": limits,
                                 "limit": "inferred" if guess is not None else "stated"},
                       detail={"design": True})
            events.append(ev)
            design[id(ev)] = frame
    return w2, events, design


WIND_FLOOR_QUANTILE = 0.9  # the stow limit is searched among the windiest tenth of daylight
MIN_SHAPE = 0.05  # rows where stow and tracking differ by less than 5 % tell nothing


def inferred_limit(w: Wide, inverters: list[str], wind: np.ndarray,
                   ratio: dict[str, np.ndarray], alpha: float) -> float | None:
    """The wind speed at and above which the rows lie at their stow angle, read from the data.

    On the daylight rows where the stow plane and the tracked plane differ by at least
    ``MIN_SHAPE``, each inverter's power is nearer the stow plane's or the tracked plane's
    (each at the inverter's usual level): a Bernoulli trial whose rate steps up at the limit.
    The limit is that step (:func:`stow_change_point`), searched at every logged wind speed
    (the logger's own resolution) at or above the daylight wind's ``WIND_FLOOR_QUANTILE``
    quantile; None when no step is significant.
    """
    sun = w.expected[inverters].ge(w.ac_w[inverters] * 0.2, axis=1).any(axis=1).to_numpy()
    day_wind = wind[sun & np.isfinite(wind)]
    if len(day_wind) < 100:
        return None
    nearer = np.zeros(len(wind))
    tested = np.zeros(len(wind))
    for inv in inverters:
        with np.errstate(invalid="ignore", divide="ignore"):
            y = np.log(w.measured[inv].to_numpy() / w.expected[inv].to_numpy())
            lr = np.log(np.maximum(ratio[inv], 1e-3))
        ok = sun & np.isfinite(y) & (np.abs(lr) >= MIN_SHAPE) & ~w.flagged[inv].to_numpy()
        c = float(np.nanmedian(y[ok])) if ok.any() else 0.0
        nearer += ok & (np.abs(y - c - lr) < np.abs(y - c))
        tested += ok
    rows = (wind >= np.quantile(day_wind, WIND_FLOOR_QUANTILE)) & (tested > 0)
    return stow_change_point(wind[rows], tested[rows], nearer[rows], alpha)


def stow_change_point(wind: np.ndarray, tested: np.ndarray, nearer: np.ndarray,
                      alpha: float) -> float | None:
    """The logged wind speed at and above which the rows' outcomes step up to mostly stow.

    Parameters
    ----------
    wind : wind speed of each row [m/s]
    tested, nearer : per row, the trials and those nearer the stow plane [-]
    alpha : false-alarm probability of the whole search

    The maximum-likelihood change point of a binomial sequence ordered by ``wind`` (Hinkley &
    Hinkley 1970), among the splits above which most trials are nearer the stow plane; kept
    when a one-sided sign test of the trials at or above it passes at ``alpha`` over the
    number of splits searched (Bonferroni), else None.
    """
    if len(wind) == 0:
        return None
    speeds, at = np.unique(wind, return_inverse=True)
    n_at = np.bincount(at, tested, minlength=len(speeds))
    k_at = np.bincount(at, nearer, minlength=len(speeds))
    n_hi, k_hi = np.cumsum(n_at[::-1])[::-1], np.cumsum(k_at[::-1])[::-1]  # at or above
    n_lo, k_lo = n_hi[0] - n_hi, k_hi[0] - k_hi  # below
    loglik = _bernoulli_loglik(k_hi, n_hi) + _bernoulli_loglik(k_lo, n_lo)
    loglik = np.where(k_hi > 0.5 * n_hi, loglik, -np.inf)
    if not np.isfinite(loglik).any():
        return None
    i = int(np.argmax(loglik))
    p = stats.binom.sf(k_hi[i] - 1, n_hi[i], 0.5)
    return float(speeds[i]) if p < alpha / len(speeds) else None


def _bernoulli_loglik(k: np.ndarray, n: np.ndarray) -> np.ndarray:
    """Log-likelihood of k successes in n Bernoulli trials at their own rate k / n."""
    with np.errstate(invalid="ignore", divide="ignore"):
        p = np.where(n > 0, k / np.maximum(n, 1), 0.5)
    return special.xlogy(k, p) + special.xlogy(n - k, 1 - p)


def _day_runs(days: np.ndarray, gap_days: int) -> list[tuple[np.datetime64, np.datetime64]]:
    """(first, last) of the runs of sorted days, joining runs at most ``gap_days`` apart."""
    out: list[list[np.datetime64]] = []
    for d in days:
        if out and (d - out[-1][1]) <= np.timedelta64(gap_days + 1, "D"):
            out[-1][1] = d
        else:
            out.append([d, d])
    return [(a, b) for a, b in out]


# --------------------------------------------------------------------------------------------
# stalls and rows out of step


@dataclass(frozen=True)
class Candidates:
    """The stall angles and the offsets searched, their rotations and ln irradiance ratios."""

    labels: list[tuple[str, float]]  # ("stall", angle) or ("step", offset)
    logr: np.ndarray  # candidates x intervals


def candidates(array: Array, s: Sky, theta: np.ndarray, rows: np.ndarray) -> Candidates:
    """Every stall angle within the rotation limits and every offset up to MAX_OFFSET_DEG, at
    the intervals ``rows`` (a mask; NaN elsewhere: only the usable intervals are compared)."""
    lim = array.tracker.max_angle_deg
    at = np.flatnonzero(rows)
    sk, th = _take(s, at), theta[at]
    tracked = plane_poa(th, array, sk)
    labels: list[tuple[str, float]] = []
    parts = []
    for ang in np.arange(-lim, lim + 1e-9, STEP_DEG):
        labels.append(("stall", float(ang)))
        parts.append(log_ratio(plane_poa(float(ang), array, sk), tracked))
    offsets = np.arange(2 * STEP_DEG, MAX_OFFSET_DEG + 1e-9, STEP_DEG)
    for off in np.concatenate([-offsets[::-1], offsets]):
        labels.append(("step", float(off)))
        parts.append(log_ratio(plane_poa(_turned(th, off, array), array, sk), tracked))
    logr = np.full((len(parts), len(theta)), np.nan)
    logr[:, at] = np.vstack(parts)
    return Candidates(labels, logr)


def angle_days(w: Wide, angle: pd.Series | None, theta: np.ndarray, array: Array
               ) -> dict[np.datetime64, tuple[str, float]]:
    """Days the ``tracker_angle`` channel shows a stall (its angle), an offset, or the rows
    following the design (``("track", 0.0)``: within the pointing tolerance all day).

    Rows turned by an offset still stop at the rotation limit: the offset is read where the
    design stays clear of the limit by ``MAX_OFFSET_DEG`` (the median difference there; the
    whole day where no such interval is logged), and the day is an out-of-step day when the
    channel follows the design so turned, and stopped at the limit, within the tolerance."""
    if angle is None or angle.dropna().empty:
        return {}
    a = angle.reindex(w.index).to_numpy(dtype=float)
    up = (w.zenith.to_numpy() < 80) & np.isfinite(a)
    clear = np.abs(theta[up]) <= array.tracker.max_angle_deg - MAX_OFFSET_DEG
    frame = pd.DataFrame({"day": w.day.to_numpy()[up], "a": a[up], "d": a[up] - theta[up],
                          "t": theta[up], "clear": clear})
    out = {}
    for day, g in frame.groupby("day"):
        if len(g) < 6 or np.ptp(g["t"]) < MIN_SWEEP_DEG:
            continue
        lo, hi = np.percentile(g["a"], [5, 95])
        mid = g["d"][g["clear"]] if g["clear"].sum() >= 3 else g["d"]
        off = float(np.median(mid))
        rest = g["a"].to_numpy() - _turned(g["t"].to_numpy(), off, array)
        spread = float(np.percentile(rest, 90) - np.percentile(rest, 10))
        if float(np.percentile(np.abs(g["d"]), 90)) <= ANGLE_TOLERANCE_DEG:
            out[np.datetime64(day)] = ("track", 0.0)
        elif hi - lo <= 2 * ANGLE_TOLERANCE_DEG:
            out[np.datetime64(day)] = ("stall", float(np.median(g["a"])))
        elif abs(off) > 2 * ANGLE_TOLERANCE_DEG and spread <= 2 * ANGLE_TOLERANCE_DEG:
            out[np.datetime64(day)] = ("step", off)
    return out


def detect(w: Wide, site: Site, usable: pd.DataFrame, rel_sigma: float, alpha: float,
           angle: pd.Series | None = None, s: Sky | None = None
           ) -> tuple[list[Event], list[Footprint]]:
    """Stalled rows and rows out of step of every tracker inverter.

    Parameters
    ----------
    usable : intervals fit for a shape test (daylight, no flag, no outage, clipping or
        curtailment, not at the AC rating)
    rel_sigma : daily relative model error [-]
    alpha : false-alarm probability per inverter-day test
    angle : the ``tracker_angle`` channel [deg] on the wide index, rows of the first tracker
        array
    """
    arrays = tracker_arrays(site)
    if not arrays:
        return [], []
    s = s or sky(w)
    days, codes = np.unique(w.day.to_numpy(), return_inverse=True)
    z = stats.norm.isf(alpha)
    first = next(iter(arrays))
    found = {}
    # the candidates' shapes depend on the rows' geometry alone: computed once for the
    # inverters that share it, at the intervals any of them can use
    rows = usable[list(arrays)].to_numpy().any(axis=1)
    shapes: dict = {}
    for inv, a in arrays.items():
        key = (a.tracker, a.gcr, a.albedo, a.bifacial)
        if key not in shapes:
            theta = designed_rotation(w, a)
            shapes[key] = (theta, candidates(a, s, theta, rows))
        theta, cand = shapes[key]
        with np.errstate(invalid="ignore", divide="ignore"):
            y = np.log(w.measured[inv].to_numpy() / w.expected[inv].to_numpy())
        y = np.where(usable[inv].to_numpy() & np.isfinite(y), y, np.nan)
        y = y - typical_shape(y, w.index, float(np.median(w.interval_s)))
        fits = day_fits(y, cand.logr, codes, len(days))
        e = np.where(usable[inv].to_numpy(), np.nan_to_num(w.expected[inv].to_numpy()), 0.0)
        seed = _seed_days(e, cand, fits, codes, days, alpha, z * rel_sigma)
        found[inv] = (theta, cand, y, fits, seed)
    _drop_shared({inv: f[4] for inv, f in found.items()},
                 {inv: days[f[3].p_value < alpha] for inv, f in found.items()})
    channel = angle_days(w, angle, found[first][0], arrays[first])
    tracking = [d for d, lab in channel.items() if lab[0] == "track"]
    shown = {d: lab for d, lab in channel.items() if lab[0] != "track"}
    for d in tracking:  # the logged rows turned as designed: no shape makes them stalled
        found[first][4].pop(d, None)
    found[first][4].update(shown)
    events: list[Event] = []
    prints: list[Footprint] = []
    for inv, (theta, cand, y, fits, seed) in found.items():
        tested = max(int(np.isfinite(fits.gain).sum()), 1)
        # days on which a sibling was tested too: only there can its shapes show the sky's
        # or the model's; on the others the inverter is judged alone
        beside = np.zeros(len(days), dtype=bool)
        for other, f in found.items():
            if other != inv:
                beside |= np.isfinite(f[3].gain)
        blocked = tracking if inv == first else []
        for lab, first_day, last_day in _group(seed, days, cand, fits, blocked, alpha):
            run = (days >= first_day) & (days <= last_day)
            own = run & np.isin(days, list(seed))  # not the days its neighbours share
            seen = inv == first and any(first_day <= d <= last_day for d in shown)
            # no sibling tested on its days: the days' ranks, not their z-scores, are the test
            if not (own & beside).any():
                span = int((last_day - first_day) / np.timedelta64(1, "D")) + 1
                p_run = run_p_value(fits.gain, own, span)
            else:  # its most significant own day over the inverter's days (Bonferroni)
                p_run = float(np.min(fits.p_value[own & beside], initial=1.0)) * tested
            if not (seen or p_run < alpha):
                continue
            # rows the channel shows held away from the stow angle are a fault whatever the
            # size of their loss; at the stow angle they may be the design's stow in wind
            stowed = lab[0] == "stall" and abs(
                lab[1] - arrays[inv].tracker.stow_angle_deg) <= ANGLE_TOLERANCE_DEG
            ev, fp = _event(w, inv, arrays[inv], s, theta, lab, (first_day, last_day), usable,
                            y, rel_sigma, z, fits, days, alpha, site.model,
                            shown=seen and not stowed)
            if ev is not None:
                events.append(ev)
                prints.append(fp)
    return events, prints


def _seed_days(e: np.ndarray, cand: Candidates, fits: DayFits, codes: np.ndarray,
               days: np.ndarray, alpha: float, material: float
               ) -> dict[np.datetime64, tuple[str, float]]:
    """The days whose best candidate is significant and explains a share of the day's usable
    expected energy ``e`` above ``material`` (the one-sided 1 - alpha quantile of the daily
    model error)."""
    out = {}
    for i in np.flatnonzero(fits.p_value < alpha):
        rows = codes == i
        ratio = np.nan_to_num(np.exp(cand.logr[fits.best[i], rows]), nan=1.0)
        total = float(np.sum(e[rows]))
        if total > 0 and float(np.sum(e[rows] * (1 - ratio))) > material * total:
            out[days[i]] = cand.labels[fits.best[i]]
    return out


def _drop_shared(seeds: dict[str, dict], shaped: dict[str, np.ndarray]) -> None:
    """A stall or an offset is one inverter's rows unlike their neighbours': a day on which
    more than half of the tracker inverters show a significant shape (``shaped``: their days
    with a p-value below alpha, whatever the candidate and however small the loss) is the
    sky's or the model's (a plant-wide stall is found from the ``tracker_angle`` channel)."""
    if len(seeds) < 2:
        return
    count: dict = {}
    for marked in shaped.values():
        for d in marked:
            count[d] = count.get(d, 0) + 1
    for seed in seeds.values():
        for d in [d for d in seed if count.get(d, 0) > len(seeds) / 2]:
            del seed[d]


def _group(seed: dict, days: np.ndarray, cand: Candidates, fits: DayFits,
           blocked: list[np.datetime64], alpha: float
           ) -> list[tuple[tuple[str, float], np.datetime64, np.datetime64]]:
    """Runs of seed days of one family, joined over the days between them that the run's
    candidate fits better than tracking (or that have no test), or single odd days, and
    extended by such days on either side; no day in two runs nor in ``blocked`` (days the
    angle channel shows the rows turning as designed). A single odd day is also bridged to a
    day whose best candidate is significant (p below ``alpha``), of the run's family and
    within ``JOIN_DEG`` of its angle, though not a seed (a duller day shows the shape
    before its loss is material). The run's angle (or offset) is the median of its seed
    days' (a day only partly stalled fits an angle between)."""
    out: list = []
    pos = {d: i for i, d in enumerate(days)}
    used = np.isin(np.arange(len(days)), [pos[d] for d in blocked if d in pos])
    for d in sorted(seed):
        if used[pos[d]]:
            continue
        fam, val = seed[d]
        k = _nearest(cand, fam, val)

        def fits_day(i: int, k: int = k) -> bool:
            return not used[i] and (fits.n[i] == 0 or fits.sse_all[i, k] < fits.sse0[i])

        def mine(i: int, fam: str = fam, val: float = val) -> bool:
            if used[i]:
                return False
            if days[i] in seed:
                return seed[days[i]][0] == fam
            f, v = cand.labels[fits.best[i]]
            return bool(fits.p_value[i] < alpha) and f == fam and abs(v - val) <= JOIN_DEG

        i0 = i1 = pos[d]
        while i1 + 1 < len(days) and not used[i1 + 1]:
            bridged = i1 + 2 < len(days) and mine(i1 + 2)  # one odd day between two
            if mine(i1 + 1) or (days[i1 + 1] not in seed and fits_day(i1 + 1)) or bridged:
                i1 += 1
            else:
                break
        while i0 > 0 and days[i0 - 1] not in seed and fits_day(i0 - 1):
            i0 -= 1
        while i0 < i1 and fits.n[i0] == 0:  # the untested days at the ends are left out
            i0 += 1
        while i1 > i0 and fits.n[i1] == 0:
            i1 -= 1
        used[i0:i1 + 1] = True
        vals = [seed[days[i]][1] for i in range(i0, i1 + 1)
                if days[i] in seed and seed[days[i]][0] == fam]
        out.append(((fam, float(np.median(vals))), days[i0], days[i1]))
    return out


def _nearest(cand: Candidates, fam: str, val: float) -> int:
    return min((abs(v - val), k) for k, (f, v) in enumerate(cand.labels) if f == fam)[1]


def _event(w: Wide, inv: str, a: Array, s: Sky, theta: np.ndarray, lab: tuple[str, float],
           span: tuple[np.datetime64, np.datetime64], usable: pd.DataFrame, y_all: np.ndarray,
           rel_sigma: float, z: float, fits: DayFits, days: np.ndarray, alpha: float,
           chain: Model, shown: bool = False) -> tuple[Event | None, Footprint | None]:
    """The event of one run of days, its energy from the run's angle (or offset); None when
    that energy lies within the model's error of the level over the run's days (one-sided
    ``z``), or when the shortfall
    measured against the inverter's usual performance index is none, or short of half the
    shape's beyond its error (a fault of the rows costs energy, so a day shape that costs
    none is the sky's or the model's), unless the angle channel ``shown`` the rows' angle:
    then the fault is seen, not inferred from the power's shape."""
    fam, val = lab
    first, last = span
    day = w.day.to_numpy()
    one = np.timedelta64(1, "D")
    # the days beyond the run that can place its onset and end: the nearest ones with usable
    # intervals (a day without any, overcast or in low sun, can tell neither)
    tested = days[fits.n > 0]
    before, after = tested[tested < first], tested[tested > last]
    prev = before[-1] if len(before) else first - one
    nxt = after[0] if len(after) else last + one
    near = (day >= prev) & (day <= nxt)
    lo, hi = int(np.flatnonzero(near)[0]), int(np.flatnonzero(near)[-1]) + 1
    u = usable[inv].to_numpy()
    m, e_all = w.measured[inv].to_numpy(), w.expected[inv].to_numpy()
    far = u & ~near & np.isfinite(m)  # the inverter's usual performance index, away from it
    pi0 = float(np.sum(m[far]) / np.sum(e_all[far])) if far.any() else 1.0
    y = y_all[lo:hi]  # about the usual day shape, whose level is the usual one
    sk = _take(s, slice(lo, hi))
    # the share from the model's own chain at the two planes: the expected power it scales
    # is the model's (its transposition and its incidence-angle losses)
    tracked = plane_poa(theta[lo:hi], a, sk, chain)
    held = plane_poa(val if fam == "stall" else _turned(theta[lo:hi], val, a), a, sk, chain)
    lr = log_ratio(held, tracked)
    d = day[lo:hi]
    weight = np.nan_to_num(e_all[lo:hi])
    start = _split(y, lr, d == first, d == prev, True, weight, z * rel_sigma,
                   prev < first - one)
    stop = _split(y, lr, d == last, d == nxt, False, weight, z * rel_sigma, nxt > last + one)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(tracked > 1.0, np.clip(1 - held / tracked, 0.0, 1.0), 0.0)
    step_all = w.interval_s.to_numpy()[lo:hi]
    loss_all = np.nan_to_num(e_all[lo:hi]) * share * step_all / 3.6e6
    # the onset and the end are known to within their days: the share of the edge days
    # outside the event is a term of the band
    edge = ((d == first) | (d == last)) & ~((np.arange(hi - lo) >= start)
                                             & (np.arange(hi - lo) < stop))
    edge_kwh = float(loss_all[edge].sum())
    lo, hi, factor = lo + start, lo + stop, share[start:stop]
    step = step_all[start:stop]
    exp = np.nan_to_num(e_all[lo:hi])
    e_kwh = float(loss_all[start:stop].sum())
    # the model's error of the level over the event's days against the days around them,
    # autocorrelation included (:func:`local_level`): a day's error for a one-day run, less
    # for a run of many days
    on = np.where(u & np.isfinite(m), 1.0, np.nan)
    daily = pd.Series(m * on).groupby(day).sum(min_count=1) / pd.Series(
        np.nan_to_num(e_all) * on).groupby(day).sum(min_count=1)
    _, rel = local_level(daily, pd.Timestamp(first), pd.Timestamp(last))
    if not (shown or e_kwh > z * rel * float(np.sum(exp * step) / 3.6e6)):
        return None, None  # within the model's error over its days, the angle refined
    # the shortfall measured against the inverter's usual performance index, and its error
    inside = u[lo:hi] & np.isfinite(m[lo:hi])
    seen = float(np.sum((pi0 * exp - np.nan_to_num(m[lo:hi]))[inside] * step[inside]) / 3.6e6)
    pred = float(np.sum((pi0 * exp * factor)[inside] * step[inside]) / 3.6e6)
    se_seen = rel * float(np.sum((pi0 * exp)[inside] * step[inside]) / 3.6e6)
    # a fault of the rows costs energy: the shortfall measured must be there, and not below
    # half the shape's (one-sided, at the confirmations' level: the half-to-twice rule of
    # the sensor's confirmations, common practice)
    if not (shown or (seen > 0 and seen >= pred / 2 - stats.norm.isf(CONFIRM_ALPHA) * se_seen)):
        return None, None  # the shape without its loss
    # the share is checked on the usable intervals only, and there only to within the
    # measured shortfall's error: its relative disagreement with that shortfall, and that
    # error, hold for the share's whole energy (the intervals at low sun or clipped, often a
    # third of it, are not checked at all)
    checked = math.hypot(seen - pred, se_seen) / pred if pred > 0 else 0.0
    spread = math.hypot(checked * e_kwh, edge_kwh)
    if fam == "step" and seen > 0 and pred > 0:
        # an offset's loss is mostly a level, which the shape alone places poorly: its share
        # is scaled to the shortfall measured against the usual performance index
        factor = np.clip(factor * seen / pred, 0.0, 1.0)
        e_kwh = float(np.sum(exp * factor * step) / 3.6e6)
    low, high = energy_band(e_kwh, rel_sigma, spread)
    kind = "tracker_stall" if fam == "stall" else "tracker_out_of_step"
    in_run = (days >= first) & (days <= last)
    ev = Event(
        kind=kind, scope=scope_of(inv), start=w.index[lo], end=w.end_of(w.index[hi - 1]),
        energy_loss_kwh=e_kwh, energy_loss_kwh_low=max(low, 0.0), energy_loss_kwh_high=high,
        method=METHOD_STALL if fam == "stall" else METHOD_STEP,
        evidence={"days": int(in_run.sum()),
                  "significant_days": int(np.sum(in_run & (fits.p_value < alpha))),
                  "min_p_value": float(np.min(fits.p_value[in_run])),
                  "measured_shortfall_kwh": seen, "predicted_shortfall_kwh": pred},
        detail={"angle_deg": val} if fam == "stall" else {"offset_deg": val})
    return ev, Footprint(ev, lo, hi, [inv], factor=factor[:, None])


def _turned(theta: np.ndarray, offset: float, array: Array) -> np.ndarray:
    lim = array.tracker.max_angle_deg
    return np.clip(theta + offset, -lim, lim)


def _split(y: np.ndarray, lr: np.ndarray, edge: np.ndarray, outside: np.ndarray, onset: bool,
           weight: np.ndarray, material: float, far: bool) -> int:
    """Where the fault began (``onset``) or ended, within the run's edge day and the day
    beyond it: the split of their usable rows, tracked on one side and the candidate's shape
    on the other, with the least squares about a constant per day (each day has its own
    level: cloud, model error). A position in ``y``. A split
    between the two days' usable rows says only that the change came between them (a night,
    and the low sun about it, where the shapes cannot tell): the edge day is then taken
    whole, as it is when too few rows are usable to place it, or, the day beyond lying
    ``far`` (days without usable rows between), when the part of it that the split gives the
    fault would lose no more than ``material`` of its expected power (``weight``) by the
    candidate's shape."""
    rows = np.flatnonzero(edge | outside)
    ok = rows[np.isfinite(y[rows]) & np.isfinite(lr[rows])]
    edge_rows = np.flatnonzero(edge)
    if len(ok) < 4:
        return int(edge_rows[0]) if onset else int(edge_rows[-1]) + 1
    pos = np.arange(len(ok))
    groups = [edge[ok], outside[ok]]
    sse = []
    for k in range(len(ok) + 1):
        z = y[ok] - np.where(pos >= k if onset else pos < k, lr[ok], 0.0)
        sse.append(sum(float(np.sum((z[g] - z[g].mean()) ** 2)) for g in groups if g.any()))
    k = int(np.argmin(sse))
    between = int(np.sum(outside[ok])) if onset else int(np.sum(edge[ok]))
    # across days without usable rows, the part of the day beyond that the split gives the
    # fault must show it: the share of its expected power the candidate takes there above
    # ``material``, as for a seed day (:func:`_seed_days`); a few rows of low sun that fit a
    # little better do not carry the fault over the days between
    part = ok[k:between] if onset else ok[between:k]
    if far and len(part) and not float(
            np.sum(weight[part] * -np.expm1(lr[part]))) > material * float(np.sum(weight[part])):
        k = between
    if onset:
        return int(ok[k]) if k not in (between, len(ok)) else int(edge_rows[0])
    return int(ok[k - 1]) + 1 if k not in (between, 0) else int(edge_rows[-1]) + 1


def _take(s: Sky, at: slice | np.ndarray) -> Sky:
    """The sky at the intervals ``at`` (a slice or positions)."""
    return Sky(*(x[at] for x in (s.zenith, s.azimuth, s.ghi, s.dni, s.dhi, s.dni_extra)))
