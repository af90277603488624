"""Weather of the demo scenario: clear sky times a stochastic clear-sky index, and the rest.

Clear-sky irradiance from Ineichen & Perez (2002) with the Linke turbidity climatology that ships
inside pvlib (Remund et al. 2003; read from the package, no download). Each local day gets a
type (clear, broken cloud, overcast) from a Markov chain with seasonal climatology. Within a day
a one-minute latent AR(1) Gaussian process, thresholded at the day's cloud fraction, says whether
the sun disc is visible. Visible minutes get the clear beam (plus a little cloud-edge
enhancement of the diffuse on cloudy days), covered minutes a diffuse-only level that varies
slowly. Averaging the minutes to the interval gives GHI; DNI = (visible share) x clear-sky DNI and
DHI = GHI - DNI cos(zenith). The split comes from the cloud process itself, not from a
decomposition model, so a model stage using Erbs or DISC does not merely invert the generator.

Ambient temperature: seasonal mean (about -0.5 C in January, 20 C in July: a climate like the
east of Austria) + a daily AR(1) anomaly + a diurnal wave whose amplitude depends on the day type.
Wind: a gamma-distributed daily mean with an afternoon maximum and gusty AR(1) noise, scaled up
on two gale days. Rain:
showers on a share of the days that grows with cloudiness, read by a 0.2 mm tipping bucket.

References
----------
P. Ineichen, R. Perez, 2002, "A new airmass independent formulation for the Linke turbidity
coefficient", Solar Energy 73(3):151-157.
J. Remund, L. Wald, M. Lefevre, T. Ranchin, J. Page, 2003, "Worldwide Linke turbidity
information", ISES Solar World Congress (from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import pvlib
from scipy.signal import lfilter
from scipy.stats import norm

from perfcheck.site import Site

DAY_TYPES = ("clear", "broken", "overcast")
DRY_SPELL = ("2025-07-01", "2025-08-20")  # a summer drought of the demo (local dates)
SHOWERS = (("2025-07-24 15:00", 12.0),)  # one shower inside it that washes the modules
# Two sunny gales (local date, strongest hourly mean wind [m/s]): the day's wind is scaled to
# reach it in the afternoon. The east of Austria knows such dry windstorms.
GALES = (("2024-10-05", 20.0), ("2026-03-18", 20.0))


@dataclass
class Weather:
    """Interval-mean weather on a UTC index of interval starts."""

    solpos: pd.DataFrame
    ghi: np.ndarray
    dni: np.ndarray
    dhi: np.ndarray
    ghi_clear: np.ndarray
    dni_clear: np.ndarray
    temp_air: np.ndarray
    wind_speed: np.ndarray
    rain: np.ndarray
    day_type: np.ndarray  # per local day: index into DAY_TYPES
    dni_extra: np.ndarray
    airmass: np.ndarray


def _season(doy: np.ndarray) -> np.ndarray:
    """+1 at midsummer (day 180), -1 at midwinter."""
    return np.cos(2 * np.pi * (doy - 180) / 365.25)


def _day_types(rng: np.random.Generator, doy: np.ndarray) -> np.ndarray:
    """Day types (index into DAY_TYPES): keep yesterday's with probability 0.5, else draw one
    from a seasonal climatology (clear 14-40 %, broken 29-43 %, overcast 17-57 %)."""
    s = _season(doy)
    clim = np.stack([0.27 + 0.13 * s, 0.36 + 0.07 * s, 0.37 - 0.20 * s], axis=1)
    types = np.empty(len(doy), dtype=int)
    prev = 1
    keep = rng.random(len(doy)) < 0.5
    draw = rng.random(len(doy))
    for i in range(len(doy)):
        if keep[i] and i > 0:
            types[i] = prev
        else:
            types[i] = int(np.searchsorted(np.cumsum(clim[i]), draw[i]))
        prev = types[i]
    return np.minimum(types, 2)


def _ar1(rng: np.random.Generator, n: int, tau: float) -> np.ndarray:
    """Unit-variance AR(1) series with time constant ``tau`` steps."""
    phi = np.exp(-1.0 / tau)
    x0 = rng.standard_normal()
    return lfilter([np.sqrt(1 - phi**2)], [1.0, -phi], rng.standard_normal(n), zi=[phi * x0])[0]


def make_weather(
    site: Site, times: pd.DatetimeIndex, interval_min: int, rng: np.random.Generator,
    dry_spell: tuple[str, str] | None = DRY_SPELL, showers: tuple = SHOWERS,
    gales: tuple = GALES,
) -> Weather:
    """Interval-mean weather at the interval starts ``times`` (UTC).

    Parameters
    ----------
    site : the site (location, zone).
    times : interval starts, UTC.
    interval_min : interval length [min].
    rng : random generator; all draws happen in a fixed order.
    dry_spell : local dates [start, end) without rain (a drought), or None.
    showers : (local time, total [mm]) of two-hour showers added on top.
    gales : (local date, strongest hourly mean wind speed [m/s]) of windy days.
    """
    times = times.as_unit("ns")
    solpos, ghi_cs, dni_cs, dni_extra, airmass = _clear_sky(site, times, interval_min)
    local = times.tz_convert(site.tz)
    days, day_idx = np.unique(np.asarray(local.normalize().tz_localize(None).asi8),
                              return_inverse=True)
    doy = pd.to_datetime(days).day_of_year.to_numpy()
    dtype = _day_types(rng, doy)
    cosz = np.clip(np.cos(np.radians(solpos["zenith"].to_numpy())), 0, None)
    ghi, dni, dhi = _irradiance(rng, dtype, day_idx, ghi_cs, dni_cs, cosz, interval_min)
    # daily values are interpolated between the local noons; solar hour drives the diurnal waves
    noon = days.astype(float) + 12 * 3600e9
    t_ns = np.asarray(local.tz_localize(None).asi8, dtype=float)
    hour = ((times.hour + times.minute / 60).to_numpy() + interval_min / 120
            + site.longitude_deg / 15) % 24
    temp_air = _temperature(rng, dtype, doy, noon, t_ns, hour)
    wind = _gales(_wind(rng, dtype, noon, t_ns, hour), local, interval_min, gales)
    rain = _rain(rng, dtype, day_idx, local, dry_spell, showers)
    return Weather(
        solpos=solpos, ghi=ghi, dni=dni, dhi=dhi, ghi_clear=ghi_cs, dni_clear=dni_cs,
        temp_air=temp_air, wind_speed=wind, rain=rain, day_type=dtype, dni_extra=dni_extra,
        airmass=airmass,
    )


def _clear_sky(site: Site, times: pd.DatetimeIndex, interval_min: int) -> tuple:
    """Sun position (NREL SPA) at the interval mid-points and Ineichen-Perez clear sky."""
    mid = times + pd.Timedelta(minutes=interval_min / 2)
    solpos = pvlib.solarposition.get_solarposition(
        mid, site.latitude_deg, site.longitude_deg, site.altitude_m, method="nrel_numpy"
    )
    solpos.index = times
    zenith = solpos["apparent_zenith"].to_numpy()
    airmass = pvlib.atmosphere.get_relative_airmass(zenith)
    am_abs = pvlib.atmosphere.get_absolute_airmass(airmass,
                                                   pvlib.atmosphere.alt2pres(site.altitude_m))
    linke = pvlib.clearsky.lookup_linke_turbidity(mid, site.latitude_deg, site.longitude_deg)
    dni_extra = pvlib.irradiance.get_extra_radiation(mid).to_numpy()
    with np.errstate(divide="ignore", invalid="ignore"):  # night: zenith beyond 90 deg
        cs = pvlib.clearsky.ineichen(zenith, am_abs, linke.to_numpy(), site.altitude_m,
                                     dni_extra)
    ghi = np.nan_to_num(np.asarray(cs["ghi"], dtype=float))
    dni = np.nan_to_num(np.asarray(cs["dni"], dtype=float))
    return solpos, ghi, dni, dni_extra, np.nan_to_num(airmass, nan=40.0)


def _irradiance(
    rng: np.random.Generator, dtype: np.ndarray, day_idx: np.ndarray, ghi_cs: np.ndarray,
    dni_cs: np.ndarray, cosz: np.ndarray, interval_min: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """GHI, DNI, DHI [W/m^2] from a one-minute sun-visible indicator (thresholded AR(1))."""
    n, nd = len(day_idx), len(dtype)
    k_clear = np.clip(rng.normal(1.0, 0.025, nd), 0.92, 1.04)  # aerosol day to day
    cloud_frac = np.select([dtype == 0, dtype == 1],
                           [0.0, rng.uniform(0.25, 0.7, nd)], rng.uniform(0.9, 1.0, nd))
    k_cloud = np.where(dtype == 2, rng.uniform(0.08, 0.45, nd), rng.uniform(0.25, 0.55, nd))
    enhance = np.where(dtype == 0, 0.0, 0.04)  # cloud-edge light while the sun is out
    latent = _ar1(rng, n * interval_min, tau=6.0).reshape(n, interval_min)
    slow = _ar1(rng, n, tau=60.0 / interval_min)
    threshold = norm.ppf(np.clip(cloud_frac, 1e-6, 1 - 1e-6))[day_idx]
    visible = np.where(cloud_frac[day_idx] == 0.0, 1.0,
                       (latent > threshold[:, None]).mean(axis=1))
    cover = np.clip(k_cloud[day_idx] * np.exp(0.25 * slow), 0.03, 0.75)
    ghi = ghi_cs * (visible * (k_clear + enhance)[day_idx] + (1 - visible) * cover)
    dni = visible * k_clear[day_idx] * dni_cs
    dhi = np.maximum(ghi - dni * cosz, 0.0)
    return dhi + dni * cosz, dni, dhi


def _temperature(rng: np.random.Generator, dtype: np.ndarray, doy: np.ndarray,
                 noon: np.ndarray, t_ns: np.ndarray, hour: np.ndarray) -> np.ndarray:
    """Ambient temperature [C]: seasonal mean, daily anomaly, a diurnal wave peaking at 14:30."""
    s = _season(doy)
    mean = (10.2 + 10.2 * np.cos(2 * np.pi * (doy - 200) / 365.25)
            + 3.0 * _ar1(rng, len(doy), tau=3.5) + np.where(dtype == 0, 1.2 * s, 0.0))
    amplitude = np.select([dtype == 0, dtype == 1], [5.0 + 1.5 * s, 3.5 + 0.5 * s], 1.5)
    return (np.interp(t_ns, noon, mean)
            + np.interp(t_ns, noon, amplitude) * np.cos(2 * np.pi * (hour - 14.5) / 24)
            + 0.3 * _ar1(rng, len(t_ns), tau=6.0))


def _wind(rng: np.random.Generator, dtype: np.ndarray, noon: np.ndarray, t_ns: np.ndarray,
          hour: np.ndarray) -> np.ndarray:
    """Wind speed at 10 m [m/s]: gamma daily mean by day type, afternoon maximum, gusts."""
    daily = rng.gamma(4.0, np.array([2.2, 3.3, 3.8])[dtype] / 4.0)
    wind = (np.interp(t_ns, noon, daily) * (1 + 0.3 * np.cos(2 * np.pi * (hour - 14) / 24))
            * np.exp(0.25 * _ar1(rng, len(t_ns), tau=3.0) - 0.03))
    return np.maximum(wind, 0.0)


def _gales(wind: np.ndarray, local: pd.DatetimeIndex, interval_min: int, gales: tuple
           ) -> np.ndarray:
    """The wind of each gale day scaled so that its strongest hourly mean is the gale's."""
    out = wind.copy()
    day = np.asarray(local.strftime("%Y-%m-%d"), dtype=object)
    window = max(60 // interval_min, 1)
    for date, peak in gales:
        on = day == date
        if on.any():
            means = pd.Series(wind[on]).rolling(window).mean()
            out[on] *= peak / float(means.max())
    return out


def _rain(
    rng: np.random.Generator, dtype: np.ndarray, day_idx: np.ndarray,
    local: pd.DatetimeIndex, dry_spell: tuple[str, str] | None, showers: tuple,
) -> np.ndarray:
    """Rain per interval [mm]: 1-3 showers on rain days, a 0.2 mm tipping bucket."""
    n, nd = len(day_idx), len(dtype)
    p_rain = np.array([0.03, 0.25, 0.62])[dtype]
    is_rain = rng.random(nd) < p_rain
    totals = rng.gamma(0.9, 9.0, nd)
    n_showers = rng.integers(1, 4, nd)
    starts = rng.uniform(0, 24, (nd, 3))
    lengths = rng.uniform(0.5, 5.0, (nd, 3))
    shares = rng.dirichlet(np.ones(3), nd)
    rain = np.zeros(n)
    hour = (local.hour + local.minute / 60).to_numpy()
    first = np.searchsorted(day_idx, np.arange(nd))
    last = np.searchsorted(day_idx, np.arange(nd), side="right")
    for d in np.flatnonzero(is_rain):
        sl = slice(first[d], last[d])
        h = hour[sl]
        for k in range(n_showers[d]):
            inside = (h >= starts[d, k]) & (h < starts[d, k] + lengths[d, k])
            if inside.any():
                rain[sl][inside] += totals[d] * shares[d, k] / inside.sum()
    if dry_spell:
        t0, t1 = (pd.Timestamp(x, tz=local.tz) for x in dry_spell)
        rain[(local >= t0) & (local < t1)] = 0.0
    for when, mm in showers:
        t0 = pd.Timestamp(when, tz=local.tz)
        inside = (local >= t0) & (local < t0 + pd.Timedelta(hours=2))
        rain[inside] += mm / max(inside.sum(), 1)
    # tipping bucket: report whole tips of 0.2 mm, carrying the remainder
    tips = np.floor(np.cumsum(rain) / 0.2 + 1e-9)
    return np.diff(tips, prepend=0.0) * 0.2
