"""Physics of the expected series: small pure functions over pandas objects.

Sun position, irradiance in the plane of an array (decomposition, transposition, horizon,
incidence-angle losses), cell temperature, the module's spectral and low-light response, DC
and AC power, clear-sky irradiance. Quantities
carry pvlib's names (``ghi``, ``dni``, ``dhi``, ``poa_global``, ``temp_air``, ``temp_cell``,
``wind_speed``, ``surface_tilt``, ``surface_azimuth``, ``pdc0``, ``gamma_pdc``); every input is a
Series or DataFrame on a UTC DatetimeIndex (or a scalar), NaN passes through, nothing prints.
"""

from __future__ import annotations

import datetime as dt
import functools
import math
import warnings
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import pandas as pd

from perfcheck.lazy import PVLIB_WITH_INIT, lazy_package

# pvlib only when a physics function runs: a command reading stored results does not load it
pvlib = lazy_package("pvlib", PVLIB_WITH_INIT)

# --------------------------------------------------------------------------------------------
# sun position


def unix_seconds(times: pd.DatetimeIndex) -> np.ndarray:
    """Seconds since 1970-01-01 UTC as float, whatever the index's time unit [s]."""
    return np.asarray(times.as_unit("ns").asi8, dtype=float) / 1e9


def per_utc_day(times: pd.DatetimeIndex, daily: Callable[[pd.DatetimeIndex], pd.Series]
                ) -> np.ndarray:
    """``daily`` of the UTC day of each instant of ``times``, evaluated once per distinct day.

    For quantities that depend on the UTC day alone (the extraterrestrial irradiance of
    Spencer 1971 by day of year, the Linke turbidity interpolated by day of year): ``daily``
    gets the UTC midnights of the days in ``times`` and returns a value for each; the value of
    an instant is that of its day, the same number as ``daily(times)`` would give it.
    """
    days, at = np.unique(unix_seconds(times) // 86400, return_inverse=True)
    values = daily(pd.DatetimeIndex(pd.to_datetime(days, unit="D", utc=True)))
    return np.asarray(values, dtype=float)[at]


def extra_radiation(times: pd.DatetimeIndex) -> pd.Series:
    """Extraterrestrial normal irradiance [W/m^2] at ``times``, pvlib's ``get_extra_radiation``
    (Spencer 1971, by the UTC day of year), computed once per day (:func:`per_utc_day`).

    References
    ----------
    Spencer, J. W. (1971). Fourier series representation of the position of the sun. Search
    2(5), 172.
    """
    return pd.Series(per_utc_day(times, pvlib.irradiance.get_extra_radiation), index=times)


def interval_midpoints(times: pd.DatetimeIndex, interval_s: float) -> pd.DatetimeIndex:
    """Centre of each interval whose start is ``times``.

    An interval mean of power or irradiance belongs to the sun at the centre of the interval:
    the sun moves up to 0.25 degrees a minute, so at 15-minute intervals the start would be off by
    up to about 2 degrees of zenith, at hourly intervals by about 4 degrees, while the error of
    the centre is of second order (the curvature of the path within the interval).
    """
    return times + pd.Timedelta(seconds=interval_s / 2)


def _time_terms(unixtime: np.ndarray, delta_t: np.ndarray) -> dict[str, np.ndarray]:
    """The site-independent SPA terms (Reda & Andreas 2004, steps 3.1-3.8).

    Returns the Earth radius vector ``R`` [AU], the geocentric right ascension ``alpha`` and
    declination ``delta`` of the sun [deg] and the nutation part of the apparent sidereal time
    ``nu`` = v - v0 [deg] (eq. 15); the mean sidereal time v0 (eq. 12) is linear in time and is
    computed exactly where it is needed.
    """
    spa = pvlib.spa
    jd = spa.julian_day(unixtime)
    jde = spa.julian_ephemeris_day(jd, delta_t)
    jce = spa.julian_ephemeris_century(jde)
    jme = spa.julian_ephemeris_millennium(jce)
    R = spa.heliocentric_radius_vector(jme)
    theta = spa.geocentric_longitude(spa.heliocentric_longitude(jme))
    beta = spa.geocentric_latitude(spa.heliocentric_latitude(jme))
    x = [f(jce) for f in (spa.mean_elongation, spa.mean_anomaly_sun, spa.mean_anomaly_moon,
                          spa.moon_argument_latitude, spa.moon_ascending_longitude)]
    nut = np.empty((2, len(jce)))
    spa.longitude_obliquity_nutation(jce, *x, nut)
    delta_psi, delta_eps = nut
    epsilon = spa.true_ecliptic_obliquity(spa.mean_ecliptic_obliquity(jme), delta_eps)
    lamd = spa.apparent_sun_longitude(theta, delta_psi, spa.aberration_correction(R))
    return {
        "R": R,
        "alpha": spa.geocentric_sun_right_ascension(lamd, epsilon, beta),
        "delta": spa.geocentric_sun_declination(lamd, epsilon, beta),
        "nu": spa.apparent_sidereal_time(0.0, delta_psi, epsilon),
    }


def _mean_sidereal_time(unixtime: np.ndarray) -> np.ndarray:
    spa = pvlib.spa
    jd = spa.julian_day(unixtime)
    return spa.mean_sidereal_time(jd, spa.julian_century(jd))


def _delta_t(unixtime: np.ndarray) -> np.ndarray:
    """pvlib's ``spa.calculate_deltat`` by year and month, evaluated once per month of the axis
    (the polynomial depends on nothing else)."""
    t = pd.DatetimeIndex(pd.to_datetime(unixtime, unit="s", utc=True))
    months, at = np.unique(t.year.to_numpy() * 12 + t.month.to_numpy() - 1, return_inverse=True)
    return np.asarray(pvlib.spa.calculate_deltat(months // 12, months % 12 + 1), dtype=float)[at]


def sun_time_terms(unixtime: np.ndarray, delta_t: float | None = None,
                   step_s: float = 3600.0) -> dict[str, np.ndarray]:
    """Site-independent SPA terms for a time axis, on a coarse grid where that is cheaper.

    The terms change slowly (the right ascension by about one degree a day), so they are computed
    on an hourly grid covering the axis and interpolated linearly; the error of that is below
    1e-6 degrees (the second derivative of the right ascension over one hour). The mean sidereal
    time, which turns 361 degrees a day, is not interpolated. Short axes are computed directly.

    Parameters
    ----------
    unixtime : numpy.ndarray
        Instants [s since 1970-01-01 UTC].
    delta_t : float, optional
        TT - UT1 [s]; default: pvlib's polynomial ``spa.calculate_deltat`` by year and month.
    step_s : float
        Grid step for the interpolated terms [s].

    References
    ----------
    Reda, I., Andreas, A. (2004). Solar position algorithm for solar radiation applications.
    Solar Energy 76(5), 577-589; NREL/TP-560-34302 (rev. 2008), section 3.
    """
    unixtime = np.asarray(unixtime, dtype=float)
    lo, hi = np.floor(unixtime.min() / step_s), np.ceil(unixtime.max() / step_s)
    grid = np.arange(lo, hi + 1) * step_s
    direct = len(grid) * 2 >= len(unixtime)
    at = unixtime if direct else grid
    dt_s = np.full(len(at), float(delta_t)) if delta_t is not None else _delta_t(at)
    terms = _time_terms(at, dt_s)
    if not direct:
        terms["alpha"] = np.rad2deg(np.unwrap(np.deg2rad(terms["alpha"])))
        terms = {k: np.interp(unixtime, grid, v) for k, v in terms.items()}
        terms["alpha"] %= 360.0
    terms["v"] = _mean_sidereal_time(unixtime) + terms.pop("nu")
    return terms


SOLAR_POSITION = ("apparent_zenith", "zenith", "apparent_elevation", "elevation", "azimuth")


def solar_position(times: pd.DatetimeIndex, latitude: float, longitude: float,
                   altitude: float = 0.0, pressure: float | None = None,
                   temperature: float = 12.0, delta_t: float | None = None,
                   atmos_refract: float = 0.5667) -> pd.DataFrame:
    """Topocentric sun position by the SPA of Reda & Andreas (2004), vectorised.

    The site-independent terms come from :func:`sun_time_terms` (computed once per time axis,
    hourly and interpolated); the topocentric part (steps 3.9-3.15) is :func:`topocentric`,
    elementwise.

    Parameters
    ----------
    times : pandas.DatetimeIndex
        UTC instants (use :func:`interval_midpoints` for interval means).
    latitude, longitude : float
        Site position [deg], north and east positive.
    altitude : float
        Site elevation [m].
    pressure : float, optional
        Air pressure [Pa]; default from altitude (``pvlib.atmosphere.alt2pres``).
    temperature : float
        Air temperature for refraction [C].
    delta_t : float, optional
        TT - UT1 [s]; default by year and month (pvlib ``spa.calculate_deltat``).
    atmos_refract : float
        Refraction at sunrise and sunset [deg].

    Returns
    -------
    pandas.DataFrame
        ``apparent_zenith``, ``zenith``, ``apparent_elevation``, ``elevation``, ``azimuth``
        [deg], azimuth clockwise from north.

    References
    ----------
    Reda, I., Andreas, A. (2004). Solar position algorithm for solar radiation applications.
    Solar Energy 76(5), 577-589; NREL/TP-560-34302 (rev. 2008), eqs. 33-47.
    """
    if pressure is None:
        pressure = float(pvlib.atmosphere.alt2pres(altitude))
    t = sun_time_terms(unix_seconds(times), delta_t)
    return pd.DataFrame(topocentric(t, latitude, longitude, altitude, pressure / 100.0,
                                    temperature, atmos_refract), index=times)


def topocentric(terms: dict[str, np.ndarray], latitude: float, longitude: float,
                altitude: float, pressure: float, temperature: float,
                atmos_refract: float) -> dict[str, np.ndarray]:
    """The topocentric sun (SPA steps 3.9-3.15) from the site-independent terms of
    :func:`sun_time_terms`: the arithmetic of pvlib's ``spa`` functions of those steps, each
    sine and cosine of an angle taken once where pvlib takes it in several functions (the
    same numbers: tests compare them to the last bit).

    ``pressure`` [mbar], ``temperature`` [C] and ``atmos_refract`` [deg] for the refraction;
    returns the columns of :func:`solar_position` as arrays.

    References
    ----------
    Reda, I., Andreas, A. (2004). Solar position algorithm for solar radiation applications.
    Solar Energy 76(5), 577-589; NREL/TP-560-34302 (rev. 2008), eqs. 33-47.
    """
    spa = pvlib.spa
    u = spa.uterm(latitude)
    x = spa.xterm(u, latitude, altitude)
    y = spa.yterm(u, latitude, altitude)
    lat = np.radians(latitude)
    sin_lat, cos_lat = np.sin(lat), np.cos(lat)
    H = spa.local_hour_angle(terms["v"], longitude, terms["alpha"])  # eq. 32
    H_rad = np.radians(H)
    sin_xi = np.sin(np.radians(spa.equatorial_horizontal_parallax(terms["R"])))  # eq. 33
    delta = np.radians(terms["delta"])
    denom = np.cos(delta) - x * sin_xi * np.cos(H_rad)
    d_alpha = np.degrees(np.arctan2(-x * sin_xi * np.sin(H_rad), denom))  # eq. 38
    delta_p = np.degrees(np.arctan2(  # eq. 40
        (np.sin(delta) - y * sin_xi) * np.cos(np.radians(d_alpha)), denom))
    Hp_rad = np.radians(H - d_alpha)  # eq. 41
    delta_p_rad = np.radians(delta_p)
    cos_Hp = np.cos(Hp_rad)
    e0 = np.degrees(np.arcsin(  # eq. 42
        sin_lat * np.sin(delta_p_rad) + cos_lat * np.cos(delta_p_rad) * cos_Hp))
    e = e0 + spa.atmospheric_refraction_correction(pressure, temperature, e0,  # eqs. 43-44
                                                   atmos_refract)
    gamma = np.degrees(np.arctan2(  # eq. 45
        np.sin(Hp_rad), cos_Hp * sin_lat - np.tan(delta_p_rad) * cos_lat)) % 360
    return {"apparent_zenith": 90.0 - e, "zenith": 90.0 - e0, "apparent_elevation": e,
            "elevation": e0, "azimuth": (gamma + 180) % 360}


class SunPositions:
    """The sun at one site (:func:`solar_position` with its defaults: delta_t by pvlib's
    polynomial, pressure from the altitude), each time axis computed once per command.

    The quality stage computes the sun at the mid-points of every stored reading's interval
    and keeps them (:meth:`keep`); the model of the same command takes its instants from there
    (:meth:`at`) and computes only those not kept. The kept values are the full algorithm's, so
    both stages see the same sun. One object serves one site for one command.
    """

    def __init__(self, latitude: float, longitude: float, altitude: float = 0.0) -> None:
        self.latitude, self.longitude, self.altitude = latitude, longitude, altitude
        self._kept: pd.DataFrame | None = None

    def compute(self, times: pd.DatetimeIndex) -> pd.DataFrame:
        """:func:`solar_position` at ``times`` (none: an empty frame of its columns)."""
        if not len(times):  # solar_position needs at least one instant
            return pd.DataFrame({c: pd.Series([], dtype=float) for c in SOLAR_POSITION},
                                index=times)
        return solar_position(times, self.latitude, self.longitude, self.altitude)

    def keep(self, times: pd.DatetimeIndex) -> pd.DataFrame:
        """:meth:`compute` at ``times``, kept for :meth:`at`."""
        pos = self.compute(times)
        kept = pos if self._kept is None else pd.concat([self._kept, pos])
        self._kept = kept[~kept.index.duplicated()].sort_index()
        return pos

    def at(self, times: pd.DatetimeIndex) -> pd.DataFrame:
        """The sun at ``times``: kept instants looked up, the others computed."""
        if self._kept is None:
            return self.compute(times)
        pos = self._kept.reindex(times)
        missing = pos["azimuth"].isna().to_numpy()
        if missing.any():
            pos.loc[missing] = self.compute(times[missing]).to_numpy()
        return pos


def declination_spencer71(dayofyear: np.ndarray) -> np.ndarray:
    """Solar declination [rad] by Spencer's Fourier series of the day of year (Spencer 1971,
    Search 2(5):172; Duffie & Beckman 2006, pp. 13-14), as pvlib's function of that name."""
    day_angle = (2.0 * np.pi / 365.0) * (dayofyear - 1)
    return (
        0.006918 -
        0.399912 * np.cos(day_angle) + 0.070257 * np.sin(day_angle) -
        0.006758 * np.cos(2.0 * day_angle) + 0.000907 * np.sin(2.0 * day_angle) -
        0.002697 * np.cos(3.0 * day_angle) + 0.00148 * np.sin(3.0 * day_angle)
    )


def equation_of_time_spencer71(dayofyear: np.ndarray) -> np.ndarray:
    """Equation of time [min] by Spencer's Fourier series (Spencer 1971, with his corrected
    constant 0.0000075; Duffie & Beckman 2006, pp. 9-11), as pvlib's function of that name."""
    day_angle = (2.0 * np.pi / 365.0) * (dayofyear - 1)
    return (1440.0 / 2 / np.pi) * (
        0.0000075 +
        0.001868 * np.cos(day_angle) - 0.032077 * np.sin(day_angle) -
        0.014615 * np.cos(2.0 * day_angle) - 0.040849 * np.sin(2.0 * day_angle)
    )


def sunrise_sunset_geometric(days: pd.DatetimeIndex, latitude: float, longitude: float
                             ) -> tuple[pd.DatetimeIndex, pd.DatetimeIndex]:
    """Geometric sunrise and sunset of each local day (``days``: local midnights, tz-aware).

    Sunset hour angle arccos(-tan(delta) tan(phi)) (Duffie & Beckman 2006, eq. 1.6.10) with the
    declination and equation of time of Spencer (1971): a circular orbit, the sun a point, no
    refraction, so off by minutes. The same arithmetic as pvlib's
    ``sun_rise_set_transit_geometric``, without loading pvlib; NaT on a polar day or night.
    """
    doy = days.day_of_year.to_numpy()
    sunset_angle = np.degrees(np.arccos(-np.tan(declination_spencer71(doy))
                                        * np.tan(np.radians(latitude))))
    utc_offset_h = (days.tz_localize(None) - days.tz_convert("UTC").tz_localize(None)
                    ).total_seconds().to_numpy() / 3600
    eot = equation_of_time_spencer71(doy)

    def local_time(hour_angle: np.ndarray) -> pd.DatetimeIndex:
        hours = (hour_angle - longitude - eot / 4.0) / 15.0 + 12.0 + utc_offset_h
        return days.normalize() + pd.to_timedelta(np.asarray(hours), unit="h")

    return local_time(-sunset_angle), local_time(sunset_angle)


# --------------------------------------------------------------------------------------------
# irradiance: decomposition


def decompose(ghi: pd.Series, solar_zenith: pd.Series, model: str = "disc",
              pressure: float = 101325.0) -> pd.DataFrame:
    """Split GHI into DNI and DHI by a published decomposition model.

    Parameters
    ----------
    ghi : pandas.Series
        Global horizontal irradiance [W/m^2].
    solar_zenith : pandas.Series
        True (not refracted) solar zenith [deg].
    model : str
        ``disc`` (Maxwell 1987), ``erbs`` (Erbs, Klein & Duffie 1982) or ``boland`` (Boland,
        Huang & Ridley 2013). DISC is the default: it uses the air mass as well as the
        clearness index, and on the typical-year files pvlib ships its monthly plane-of-array
        sums stay within about 2 % of those from the files' own DNI and DHI on fixed and tracked
        planes, where Erbs's beam runs low by up to 5-15 % in winter (tests/test_physics.py,
        sun above 3 deg). Below about 5 deg of solar elevation DISC's beam falls away (pvlib
        bounds cos z at 0.065 and the air mass at 12, and sets DNI to 0 beyond 87 deg), so a
        plane that faces the low sun gets that light as diffuse: on the Sand Point file
        (55 deg N), a tracker without backtracking, every daylight hour counted, runs 8 % low in
        December and 2 % in the mean month. DIRINT (Perez et al. 1992), Boland, Erbs and
        Orgill & Hollands run lower still there. Such a month's PR from GHI alone reads high
        by as much, beyond the modelled-irradiance uncertainty of its interval.
    pressure : float
        Site air pressure, used by ``disc`` [Pa].

    Returns
    -------
    pandas.DataFrame
        ``dni``, ``dhi`` [W/m^2].

    References
    ----------
    Erbs, D. G., Klein, S. A., Duffie, J. A. (1982). Estimation of the diffuse radiation
    fraction for hourly, daily and monthly-average global radiation. Solar Energy 28(4), 293-302,
    eqs. 1 (the diffuse fraction polynomial).
    Boland, J., Huang, J., Ridley, B. (2013). Decomposing global solar radiation into its direct
    and diffuse components. Renew. Sustain. Energy Rev. 28, 749-756 (from memory).
    Maxwell, E. L. (1987). A quasi-physical model for converting hourly global horizontal to
    direct normal insolation. SERI/TR-215-3087.
    Perez, R., Ineichen, P., Maxwell, E., Seals, R., Zelenka, A. (1992). Dynamic
    global-to-direct irradiance conversion models. ASHRAE Transactions 98(1), 354-369 (DIRINT;
    from memory). Orgill, J. F., Hollands, K. G. T. (1977). Correlation equation for hourly
    diffuse radiation on a horizontal surface. Solar Energy 19(4), 357-359 (from memory).
    """
    times = ghi.index
    if model == "erbs":
        out = pvlib.irradiance.erbs(ghi, solar_zenith, times)
    elif model == "boland":
        out = pvlib.irradiance.boland(ghi, solar_zenith, times)
    elif model == "disc":
        dni = pvlib.irradiance.disc(ghi, solar_zenith, times, pressure=pressure)["dni"]
        cosz = np.cos(np.radians(solar_zenith))
        out = {"dni": dni, "dhi": (ghi - dni * cosz).clip(lower=0.0)}
    else:
        raise ValueError(f"unknown decomposition model {model!r}")
    return pd.DataFrame({"dni": out["dni"], "dhi": out["dhi"]}, index=times)


def complete_components(ghi: pd.Series, solar_zenith: pd.Series, dhi: pd.Series | None = None,
                        dni: pd.Series | None = None, model: str = "disc",
                        pressure: float = 101325.0) -> pd.DataFrame:
    """GHI, DNI and DHI from what was measured, filling the rest.

    Measured DHI and DNI are used where present. Where only one of them is measured the other
    follows from the closure GHI = DNI cos(z) + DHI; where neither is, from the decomposition
    ``model`` (see :func:`decompose`).

    Parameters
    ----------
    ghi, dhi, dni : pandas.Series
        Irradiance [W/m^2]; ``dhi`` and ``dni`` optional.
    solar_zenith : pandas.Series
        True solar zenith [deg].

    Returns
    -------
    pandas.DataFrame
        ``ghi``, ``dni``, ``dhi`` [W/m^2].
    """
    est = decompose(ghi, solar_zenith, model, pressure)
    cosz = np.cos(np.radians(solar_zenith)).clip(lower=0.065)  # as pvlib's min_cos_zenith
    nan = pd.Series(np.nan, index=ghi.index)
    dhi = nan if dhi is None else dhi
    dni = nan if dni is None else dni
    dhi_f = dhi.fillna((ghi - dni * cosz).clip(lower=0.0)).fillna(est["dhi"])
    dni_f = dni.fillna(((ghi - dhi) / cosz).clip(lower=0.0)).fillna(est["dni"])
    dni_f = dni_f.where(solar_zenith < 90.0, 0.0)
    return pd.DataFrame({"ghi": ghi, "dni": dni_f, "dhi": dhi_f})


# --------------------------------------------------------------------------------------------
# irradiance: horizon


def horizon_elevation(azimuth: np.ndarray | pd.Series, horizon: Sequence[tuple[float, float]]
                      ) -> np.ndarray:
    """Elevation of the horizon profile at the given azimuths [deg].

    Linear interpolation between the profile's points; the profile wraps at 360 degrees (the
    last point connects to the first). An empty profile is a flat horizon (0).

    Parameters
    ----------
    azimuth : array-like
        Azimuth clockwise from north [deg].
    horizon : sequence of (azimuth [deg], elevation [deg])
    """
    az = np.mod(np.asarray(azimuth, dtype=float), 360.0)
    if not horizon:
        return np.zeros_like(az)
    pts = np.asarray(sorted(horizon), dtype=float)
    xp = np.concatenate([pts[:, 0] - 360.0, pts[:, 0], pts[:, 0] + 360.0])
    fp = np.tile(pts[:, 1], 3)
    return np.interp(az, xp, fp)


def has_horizon(horizon: Sequence[tuple[float, float]]) -> bool:
    """True when the profile rises above the flat horizon anywhere."""
    return any(el > 0 for _, el in horizon)


def sky_view_ratio(surface_tilt: float, surface_azimuth: float,
                   horizon: Sequence[tuple[float, float]], band_deg: float = 90.0,
                   step_deg: float = 0.5) -> float:
    """Share of the isotropic sky seen by a tilted plane that the horizon profile leaves open.

    Ratio of the cosine-weighted solid angle of the sky above the profile (and in front of the
    plane) to that above a flat horizon:
    R = ∫∫_{e>h(φ)} max(cos θ, 0) cos e de dφ / ∫∫_{e>0} max(cos θ, 0) cos e de dφ,
    with cos θ = sin β cos e cos(φ - γ) + cos β sin e. Over a flat horizon the denominator is
    π (1 + cos β)/2, the isotropic view factor (Liu & Jordan 1963). ``band_deg`` limits the
    elevation band (used for Perez's horizon-brightening band, 6.5 degrees wide: Perez et al.
    1987, from memory). Midpoint rule on a ``step_deg`` grid; numerator and denominator share it.

    Parameters
    ----------
    surface_tilt, surface_azimuth : float
        Plane of the array [deg], azimuth clockwise from north.
    horizon : sequence of (azimuth [deg], elevation [deg])
    band_deg : float
        Upper elevation of the sky band considered [deg].

    References
    ----------
    Liu, B. Y. H., Jordan, R. C. (1963). The long-term average performance of flat-plate solar
    energy collectors. Solar Energy 7(2), 53-74.
    Duffie, J. A., Beckman, W. A. (2013). Solar Engineering of Thermal Processes, 4th ed.,
    section 2.16 (view factors; from memory).
    """
    if not has_horizon(horizon):
        return 1.0
    phi = np.radians(np.arange(step_deg / 2, 360.0, step_deg))[:, None]
    e_deg = np.arange(step_deg / 2, band_deg, step_deg)[None, :]
    e = np.radians(e_deg)
    b, g = np.radians(surface_tilt), np.radians(surface_azimuth)
    cos_t = np.sin(b) * np.cos(e) * np.cos(phi - g) + np.cos(b) * np.sin(e)
    w = np.clip(cos_t, 0.0, None) * np.cos(e)
    total = w.sum()
    if total <= 0:
        return 1.0
    open_ = e_deg > horizon_elevation(np.degrees(phi[:, 0]), horizon)[:, None]
    return float((w * open_).sum() / total)


def beam_visible(solar_elevation: pd.Series, solar_azimuth: pd.Series,
                 horizon: Sequence[tuple[float, float]]) -> pd.Series:
    """1.0 where the sun stands above the horizon profile, else 0.0 (NaN passes through).

    Parameters
    ----------
    solar_elevation : pandas.Series
        Apparent (refracted) solar elevation [deg].
    solar_azimuth : pandas.Series
        Solar azimuth [deg], clockwise from north.
    horizon : sequence of (azimuth [deg], elevation [deg])
    """
    if not has_horizon(horizon):
        return pd.Series(1.0, index=solar_elevation.index).where(solar_elevation.notna())
    h = horizon_elevation(solar_azimuth.to_numpy(), horizon)
    vis = (solar_elevation.to_numpy() > h).astype(float)
    return pd.Series(vis, index=solar_elevation.index).where(solar_elevation.notna())


# --------------------------------------------------------------------------------------------
# irradiance: transposition and incidence angle


def sky_diffuse_parts(surface_tilt: float, surface_azimuth: float, dhi: pd.Series,
                      dni: pd.Series, dni_extra: pd.Series, solar_zenith: pd.Series,
                      solar_azimuth: pd.Series, airmass: pd.Series, model: str = "perez"
                      ) -> pd.DataFrame:
    """Sky diffuse irradiance in the plane, split into isotropic, circumsolar and horizon parts.

    Parameters
    ----------
    surface_tilt, surface_azimuth : float
        Plane [deg], azimuth clockwise from north.
    dhi, dni, dni_extra : pandas.Series
        Diffuse horizontal, direct normal, extraterrestrial normal irradiance [W/m^2].
    solar_zenith : pandas.Series
        Apparent solar zenith [deg].
    solar_azimuth : pandas.Series
        Solar azimuth [deg].
    airmass : pandas.Series
        Relative air mass [-] (Perez only).
    model : str
        ``perez`` (Perez et al. 1990, all-sites composite coefficients), ``haydavies``
        (Hay & Davies 1980) or ``isotropic`` (Liu & Jordan 1963).

    Returns
    -------
    pandas.DataFrame
        ``isotropic``, ``circumsolar``, ``horizon`` [W/m^2].

    References
    ----------
    Perez, R., Ineichen, P., Seals, R., Michalsky, J., Stewart, R. (1990). Modeling daylight
    availability and irradiance components from direct and global irradiance. Solar Energy
    44(5), 271-289 (coefficients: table 6, from memory).
    Hay, J. E., Davies, J. A. (1980). Calculation of the solar radiation incident on an
    inclined surface. Proc. First Canadian Solar Radiation Data Workshop, 59-72.
    Liu, B. Y. H., Jordan, R. C. (1963). Solar Energy 7(2), 53-74.
    """
    if model == "perez":
        parts = pvlib.irradiance.perez(surface_tilt, surface_azimuth, dhi, dni, dni_extra,
                                       solar_zenith, solar_azimuth, airmass,
                                       return_components=True)
    elif model == "haydavies":
        parts = pvlib.irradiance.haydavies(surface_tilt, surface_azimuth, dhi, dni, dni_extra,
                                           solar_zenith, solar_azimuth, return_components=True)
    elif model == "isotropic":
        parts = {"poa_isotropic": pvlib.irradiance.isotropic(surface_tilt, dhi)}
    else:
        raise ValueError(f"unknown transposition model {model!r}")
    zero = pd.Series(0.0, index=dhi.index)
    return pd.DataFrame({k: parts.get(f"poa_{k}", zero)
                         for k in ("isotropic", "circumsolar", "horizon")}, index=dhi.index)


def iam_beam(aoi: pd.Series, model: str = "physical") -> pd.Series:
    """Incidence-angle modifier for beam irradiance [-].

    Parameters
    ----------
    aoi : pandas.Series
        Angle of incidence [deg].
    model : str
        ``physical`` (Fresnel and absorption in the cover glass, De Soto et al. 2006, n 1.526,
        K 4/m, L 2 mm), ``ashrae`` (Souka & Safwat 1966, b0 0.05), ``martin_ruiz`` (Martin &
        Ruiz 2001, a_r 0.16) or ``none``.

    References
    ----------
    De Soto, W., Klein, S. A., Beckman, W. A. (2006). Improvement and validation of a model for
    photovoltaic array performance. Solar Energy 80(1), 78-88, eqs. 14-15.
    Souka, A. F., Safwat, H. H. (1966). Determination of the optimum orientations for the
    double exposure flat-plate collector and its reflections. Solar Energy 10(4), 170-174.
    Martin, N., Ruiz, J. M. (2001). Calculation of the PV modules angular losses under field
    conditions by means of an analytical model. Sol. Energy Mater. Sol. Cells 70, 25-38.
    """
    if model == "none":
        return pd.Series(1.0, index=aoi.index)
    fn = {"physical": pvlib.iam.physical, "ashrae": pvlib.iam.ashrae,
          "martin_ruiz": pvlib.iam.martin_ruiz}[model]
    return pd.Series(np.asarray(fn(aoi.to_numpy()), dtype=float), index=aoi.index).fillna(0.0)


def iam_diffuse(surface_tilt: float | pd.Series, model: str = "physical"
                ) -> dict[str, float | pd.Series]:
    """Incidence-angle modifiers for isotropic sky, horizon band and ground diffuse [-].

    Integrated over the sky dome, the horizon and the ground as seen by the plane (Marion 2017)
    for the beam model of :func:`iam_beam`. For a moving plane (``surface_tilt`` a Series, a
    tracker) the modifiers are integrated on a one-degree grid of tilts and interpolated
    linearly (an error below 0.1 %; 32 400 directions per tilt make a per-interval integral
    too large to hold).

    References
    ----------
    Marion, B. (2017). Numerical method for angle-of-incidence correction factors for diffuse
    radiation incident photovoltaic modules. Solar Energy 147, 344-348.
    """
    if model == "none":
        return {"sky": 1.0, "horizon": 1.0, "ground": 1.0}
    if np.ndim(surface_tilt) == 0:
        return dict(_marion_fixed(model, float(surface_tilt)))
    tilt = np.asarray(surface_tilt, dtype=float)
    top = min(180, 10 * math.ceil(float(np.nanmax(tilt, initial=0.0)) / 10))  # tens of degrees
    grid, table = _marion_grid(model, top)
    return {k: pd.Series(np.interp(tilt, grid, table[k]),
                         index=surface_tilt.index).where(surface_tilt.notna())
            for k in ("sky", "horizon", "ground")}


@functools.lru_cache(maxsize=64)
def _marion_fixed(model: str, surface_tilt: float) -> dict[str, float]:
    """Marion's diffuse modifiers of ``model`` for a fixed plane, integrated once per process
    (the model runs month by month)."""
    out = pvlib.iam.marion_diffuse(model, surface_tilt)
    return {k: float(np.nan_to_num(out[k], nan=1.0)) for k in ("sky", "horizon", "ground")}


@functools.lru_cache(maxsize=8)
def _marion_grid(model: str, top_deg: int) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Marion's diffuse modifiers of ``model`` on the one-degree grid of tilts 0 to
    ``top_deg``, integrated once per process (the model runs month by month)."""
    grid = np.arange(0.0, top_deg + 1.0)
    out = pvlib.iam.marion_diffuse(model, grid)
    return grid, {k: np.nan_to_num(np.asarray(out[k], dtype=float), nan=1.0)
                  for k in ("sky", "horizon", "ground")}


def sky_view(surface_tilt: float | pd.Series, surface_azimuth: float | pd.Series,
             horizon: Sequence[tuple[float, float]], band_deg: float = 90.0
             ) -> float | pd.Series:
    """:func:`sky_view_ratio` of a fixed plane, or of a moving plane (Series, a tracker).

    A moving plane's orientations are rounded to whole degrees and each distinct one is
    integrated once (the ratio changes smoothly with the orientation); a plane or orientation
    met again in the same process is not integrated again (:func:`_sky_view_of`).
    """
    if not has_horizon(horizon):
        return 1.0
    profile = tuple((float(a), float(e)) for a, e in horizon)
    if np.ndim(surface_tilt) == 0:
        return _sky_view_of(float(surface_tilt), float(surface_azimuth), profile, band_deg)
    keys = pd.DataFrame({"tilt": surface_tilt.round(), "az": surface_azimuth.round() % 360.0})
    distinct = keys.dropna().drop_duplicates()
    ratio = [_sky_view_of(float(t), float(a), profile, band_deg)
             for t, a in distinct.itertuples(index=False)]
    at = pd.MultiIndex.from_frame(distinct).get_indexer(pd.MultiIndex.from_frame(keys))
    # an orientation not integrated (a NaN one) takes the NaN appended at position -1
    return pd.Series(np.append(np.asarray(ratio, dtype=float), np.nan)[at],
                     index=surface_tilt.index)


@functools.lru_cache(maxsize=4096)
def _sky_view_of(surface_tilt: float, surface_azimuth: float,
                 horizon: tuple[tuple[float, float], ...], band_deg: float) -> float:
    """:func:`sky_view_ratio`, kept for the planes and orientations met again (the model runs
    month by month, and takes each plane's ratios in several of its terms)."""
    return sky_view_ratio(surface_tilt, surface_azimuth, horizon, band_deg)


def poa_components(surface_tilt: float | pd.Series, surface_azimuth: float | pd.Series,
                   solpos: pd.DataFrame,
                   ghi: pd.Series, dni: pd.Series, dhi: pd.Series, dni_extra: pd.Series,
                   airmass: pd.Series, albedo: float = 0.2,
                   horizon: Sequence[tuple[float, float]] = (), transposition: str = "perez",
                   iam: str = "physical") -> pd.DataFrame:
    """Plane-of-array irradiance of one plane, with horizon and incidence-angle losses.

    poa_global = B·v + D_c·v + D_i·R_sky + D_h·R_band + G_g, with B = DNI max(cos AOI, 0), D_c,
    D_i, D_h the circumsolar, isotropic and horizon parts of the sky diffuse
    (:func:`sky_diffuse_parts`), v = 1 when the sun is above the horizon profile else 0
    (:func:`beam_visible`), R the sky-view ratios of :func:`sky_view_ratio`, and ground
    reflection G_g = GHI ρ (1 - cos β)/2 (Liu & Jordan 1963; the light the obstructions
    themselves reflect is neglected). ``poa_effective`` weights the beam and circumsolar parts by
    the beam IAM at the angle of incidence and the diffuse parts by their integrated IAMs
    (:func:`iam_diffuse`).

    Parameters
    ----------
    surface_tilt, surface_azimuth : float or pandas.Series
        Plane [deg], azimuth clockwise from north; Series for a moving plane (a tracker,
        :func:`singleaxis`).
    solpos : pandas.DataFrame
        From :func:`solar_position`.
    ghi, dni, dhi, dni_extra : pandas.Series
        [W/m^2].
    airmass : pandas.Series
        Relative air mass [-].
    albedo : float
        Ground reflectance [-].
    horizon : sequence of (azimuth [deg], elevation [deg])
    transposition, iam : str
        Model names, see :func:`sky_diffuse_parts` and :func:`iam_beam`.

    Returns
    -------
    pandas.DataFrame
        ``aoi`` [deg], ``poa_direct``, ``poa_sky_diffuse``, ``poa_ground_diffuse``,
        ``poa_global``, ``poa_effective`` [W/m^2].
    """
    zen, azi = solpos["apparent_zenith"], solpos["azimuth"]
    aoi = pvlib.irradiance.aoi(surface_tilt, surface_azimuth, zen, azi)
    vis = beam_visible(solpos["apparent_elevation"], azi, horizon)
    direct = (dni * np.cos(np.radians(aoi)).clip(lower=0.0)) * vis
    parts = sky_diffuse_parts(surface_tilt, surface_azimuth, dhi, dni, dni_extra, zen, azi,
                              airmass, transposition)
    circum = parts["circumsolar"] * vis
    iso = parts["isotropic"] * sky_view(surface_tilt, surface_azimuth, horizon)
    band = parts["horizon"] * sky_view(surface_tilt, surface_azimuth, horizon, 6.5)
    ground = pvlib.irradiance.get_ground_diffuse(surface_tilt, ghi, albedo)
    k_b = iam_beam(aoi, iam)
    k_d = iam_diffuse(surface_tilt, iam)
    sky = (circum + iso + band).clip(lower=0.0)
    return pd.DataFrame({
        "aoi": aoi,
        "poa_direct": direct,
        "poa_sky_diffuse": sky,
        "poa_ground_diffuse": ground,
        "poa_global": direct + sky + ground,
        "poa_effective": ((direct + circum) * k_b + iso * k_d["sky"] + band * k_d["horizon"]
        + ground * k_d["ground"]).clip(lower=0.0),
    })


def poa_translated(reading: pd.Series, reading_modelled: pd.Series, poa_global: pd.Series,
                   poa_effective: pd.Series, sensor_poa_global: pd.Series, terms: pd.DataFrame,
                   sensor_terms: pd.DataFrame) -> pd.DataFrame:
    """A plane-of-array sensor's reading carried to another plane by the modelled ratio of the
    two planes' irradiance, and how much that still depends on the decomposition of GHI.

    G_t = G_s · G_o / G_s,model: the other plane's modelled irradiance G_o scaled by the
    sensor's reading G_s over its own modelled value (both modelled values from the same
    horizontal components). The errors the two modelled values share cancel in the ratio
    (the GHI sensor's calibration wholly; a decomposition's error in the beam fraction as far
    as both planes see the beam alike) and what the sensor measured is kept. A relative error
    e of the decomposition's DNI moves G_o by c_o e and G_s,model by c_s e
    (``dni_sensitivity`` of :func:`poa_decomposition_terms`), so G_t by, to first order,
    c_t e = (G_s / G_s,model) (c_o - (G_o / G_s,model) c_s) e: near 0 on planes that face
    the sun alike, larger than c_o where one plane sees the beam and the other does not (east
    and west planes in the morning). The range over the beam the decomposition cannot see at
    low sun (``beam_range``) carries over alike. First-order propagation of a ratio (JCGM
    100:2008, GUM, 5.1.2, from memory); the plane-to-plane ratio itself is common practice
    (no published comparison checked). ``poa_effective`` is scaled as ``poa_global``.

    Parameters
    ----------
    reading : pandas.Series
        The sensor's reading [W/m^2].
    reading_modelled : pandas.Series
        The same reading as the model sees it in the sensor's plane [W/m^2]: the modelled
        ``poa_global`` for a pyranometer, ``poa_effective`` for a reference cell.
    poa_global, poa_effective : pandas.Series
        Modelled irradiance of the other plane (:func:`poa_components`) [W/m^2].
    sensor_poa_global : pandas.Series
        Modelled ``poa_global`` of the sensor's plane [W/m^2].
    terms, sensor_terms : pandas.DataFrame
        :func:`poa_decomposition_terms` of the other plane and of the sensor's plane.

    Returns
    -------
    pandas.DataFrame
        ``poa_global``, ``poa_effective``, ``dni_sensitivity`` (c_t), ``beam_range`` [W/m^2]
        of the other plane; NaN where the reading is missing or the sensor's plane gets no
        modelled light (the ratio is undefined).
    """
    scale = (reading / reading_modelled).where(reading_modelled > 0)
    ratio = (poa_global / sensor_poa_global).where(sensor_poa_global > 0)
    out = pd.DataFrame({"poa_global": poa_global * scale, "poa_effective": poa_effective * scale})
    for k in ("dni_sensitivity", "beam_range"):
        out[k] = scale * (terms[k] - ratio * sensor_terms[k])
    return out


# pvlib.irradiance.disc's defaults: cos z bounded at 0.065 in the clearness index (zenith
# 86.27 deg), DNI set to 0 beyond 87 deg (pvlib 0.16 docstring)
DISC_MIN_COS_ZENITH = 0.065


def poa_decomposition_terms(surface_tilt: float | pd.Series, surface_azimuth: float | pd.Series,
                            solpos: pd.DataFrame, ghi: pd.Series, dni: pd.Series,
                            dhi: pd.Series, clearsky_dni: pd.Series, dni_extra: pd.Series,
                            airmass: pd.Series, albedo: float = 0.2,
                            horizon: Sequence[tuple[float, float]] = (),
                            transposition: str = "perez", rel_step: float = 0.1,
                            min_cos_zenith: float = DISC_MIN_COS_ZENITH,
                            rows: pd.Series | None = None) -> pd.DataFrame:
    """How the plane-of-array irradiance depends on a decomposition's split of GHI [W/m^2].

    ``dni_sensitivity``: the change of poa_global per relative change of DNI with GHI held.
    The error of a decomposition moves light between beam and diffuse: DNI becomes
    DNI (1 + e) and DHI = GHI - DNI cos(z) moves the other way, DHI - e DNI cos(z) (true
    zenith z, as :func:`decompose` closes it; clipped at zero). The sensitivity
    c = d poa_global / d e is the central difference of :func:`poa_components` over
    e = +-``rel_step``, a numerical sensitivity coefficient over the input's own uncertainty
    (JCGM 100:2008, GUM, 5.1.3 note 2: from memory), so it follows the transposition, the
    horizon and Perez's brightness bins as they are (the first-order form with Perez's
    coefficients held, poa_direct - DNI cos z poa_sky_diffuse / DHI, runs 20-50 % below it in
    the monthly sums on pvlib's TMY3 and TMY2 files: moving light into the beam also raises
    the circumsolar share). A relative DNI error e changes the plane's irradiance by c e;
    positive where the plane sees more of the beam than the horizontal does (a tracker at low
    sun), near zero or negative where it sees less. 0 with the sun below the horizon
    (apparent zenith 90 degrees or more, as the metrics count daylight); NaN where
    poa_global is.

    ``beam_range``: the range of poa_global over the beam a decomposition cannot see. At low
    sun DISC (Maxwell 1987) is outside its data: pvlib bounds cos z at 0.065 in the clearness
    index (zenith 86.3 deg) and the air mass at 12, and sets DNI to 0 beyond 87 deg
    (:func:`decompose`), so the split of GHI there is unknown, not just biased, and a relative
    DNI error cannot carry it. In those daylight intervals (cos z below ``min_cos_zenith``,
    GHI above 0) the beam lies anywhere between 0 and the smaller of two physical bounds, the
    clear-sky DNI and the DNI that leaves no diffuse light, GHI / cos z. The range is
    poa_global with that bound (DHI = GHI - DNI cos z) less poa_global with no beam
    (DHI = GHI), both by :func:`poa_components` with GHI held (no IAM); 0 elsewhere.
    Positive where the plane faces the low sun (a tracker), negative where it turns away. The
    estimate sits at or near the range's lower end (the cut beam), so the range itself, not a
    symmetric distribution's standard deviation about its middle, bounds the error.

    The four transpositions (DNI shifted either way, the beam at its bound and at 0) are
    taken in one call of :func:`poa_components` over the rows each needs, stacked: each row
    is computed on its own, so the values are those of four calls, without pvlib's cost per
    call four times over.

    Parameters
    ----------
    surface_tilt, surface_azimuth, solpos, ghi, dni, dhi, dni_extra, airmass, albedo, horizon,
    transposition : as :func:`poa_components`
    clearsky_dni : pandas.Series
        Clear-sky DNI [W/m^2] (:func:`clearsky`; NaN leaves GHI / cos z as the bound).
    rel_step : float
        Relative change of DNI of the difference [-].
    min_cos_zenith : float
        Below this cos z the decomposition's beam is taken as unknown [-].
    rows : pandas.Series of bool, optional
        The rows where the terms are wanted (0 elsewhere); all rows by default.

    Returns
    -------
    pandas.DataFrame
        ``dni_sensitivity`` and ``beam_range`` [W/m^2] on the index of ``solpos``.
    """
    cosz = np.cos(np.radians(solpos["zenith"]))
    day = (solpos["apparent_zenith"] < 90.0).to_numpy()
    if rows is not None:
        day = day & rows.to_numpy(dtype=bool)
    low = day & (cosz < min_cos_zenith).to_numpy() & (ghi > 0).to_numpy()
    out = pd.DataFrame({"dni_sensitivity": 0.0, "beam_range": 0.0}, index=solpos.index)
    if not day.any():
        return out
    beam, diffuse = dni[day], dhi[day]
    shift = beam * np.cos(np.radians(solpos["zenith"][day])) * rel_step
    g, c = ghi[low], cosz[low].clip(lower=0.0)
    bound = (g / c.where(c > 0)).clip(upper=clearsky_dni[low]).fillna(0.0)
    bound = bound.where(c > 0, 0.0)
    cases = [(day, beam * (1.0 + sign * rel_step), (diffuse - sign * shift).clip(lower=0.0))
             for sign in (1.0, -1.0)]
    cases += [(low, b, (g - b * c).clip(lower=0.0)) for b in (bound, bound * 0.0)]
    up, down, top, none = _poa_global_stacked(surface_tilt, surface_azimuth, solpos, ghi, cases,
                                              dni_extra, airmass, albedo, horizon,
                                              transposition)
    out.loc[day, "dni_sensitivity"] = (up - down) / (2.0 * rel_step)
    out.loc[low, "beam_range"] = np.nan_to_num(top - none, nan=0.0)
    return out


def _poa_global_stacked(surface_tilt: float | pd.Series, surface_azimuth: float | pd.Series,
                        solpos: pd.DataFrame, ghi: pd.Series,
                        cases: list[tuple[np.ndarray, pd.Series, pd.Series]],
                        dni_extra: pd.Series, airmass: pd.Series, albedo: float,
                        horizon: Sequence[tuple[float, float]], transposition: str
                        ) -> list[np.ndarray]:
    """poa_global of :func:`poa_components` (no IAM) for each case (rows mask, DNI and DHI on
    those rows), in one call over the cases' rows stacked (on a plain row index)."""
    pos = np.concatenate([np.flatnonzero(mask) for mask, _, _ in cases])

    def at(x: Any) -> Any:
        if isinstance(x, pd.Series | pd.DataFrame):
            return x.iloc[pos].reset_index(drop=True)
        return x

    def stack(k: int) -> pd.Series:
        return pd.Series(np.concatenate([case[k].to_numpy(dtype=float) for case in cases]))

    sun = solpos[["apparent_zenith", "azimuth", "apparent_elevation"]]  # what it reads
    poa = poa_components(at(surface_tilt), at(surface_azimuth), at(sun), at(ghi), stack(1),
                         stack(2), at(dni_extra), at(airmass), albedo, horizon, transposition,
                         "none")["poa_global"].to_numpy()
    return np.split(poa, np.cumsum([int(mask.sum()) for mask, _, _ in cases])[:-1])


# --------------------------------------------------------------------------------------------
# trackers and bifacial modules


def singleaxis(solpos: pd.DataFrame, axis_tilt: float, axis_azimuth: float, max_angle: float,
               backtrack: bool, gcr: float) -> pd.DataFrame:
    """Orientation of a single-axis tracker: rotation and the plane it gives the modules.

    The rotation follows the sun within ``max_angle`` (true tracking), or, with
    ``backtrack``, turns back so that the rows do not shade one another at low sun (Lorenzo et
    al. 2011, through pvlib). With the sun below the horizon the tracker is taken flat
    (rotation 0), its night position; pvlib gives no angle there.

    Parameters
    ----------
    solpos : pandas.DataFrame
        From :func:`solar_position` (``apparent_zenith``, ``azimuth``).
    axis_tilt : float
        Tilt of the rotation axis from horizontal [deg] (0: a horizontal tracker).
    axis_azimuth : float
        Compass direction the axis points along, clockwise from north [deg] (180: a
        north-south axis).
    max_angle : float
        Largest rotation either way from flat [deg].
    backtrack : bool
        Turn back at low sun to avoid row-to-row shading.
    gcr : float
        Ground coverage ratio, module length across the axis over the row pitch [-].

    Returns
    -------
    pandas.DataFrame
        ``tracker_theta`` (rotation, positive turns the modules toward the west for a
        north-south axis), ``surface_tilt``, ``surface_azimuth`` [deg].

    References
    ----------
    Marion, W. F., Dobos, A. P. (2013). Rotation angle for the optimum tracking of one-axis
    trackers. NREL/TP-6A20-58891. Lorenzo, E., Narvarte, L., Munoz, J. (2011). Tracking and
    back-tracking. Prog. Photovolt. 19(6), 747-753. Anderson, K., Mikofski, M. (2020).
    Slope-aware backtracking for single-axis trackers. NREL/TP-5K00-76626.
    """
    out = pvlib.tracking.singleaxis(solpos["apparent_zenith"], solpos["azimuth"], axis_tilt,
                                    axis_azimuth, max_angle, backtrack, gcr)
    theta = out["tracker_theta"].where(solpos["apparent_zenith"].isna(),
                                       out["tracker_theta"].fillna(0.0))
    plane = pvlib.tracking.calc_surface_orientation(theta, axis_tilt, axis_azimuth)
    return pd.DataFrame({"tracker_theta": theta, "surface_tilt": plane["surface_tilt"],
                         "surface_azimuth": plane["surface_azimuth"]}, index=solpos.index)


def poa_at_rotation(tracker_theta: float | np.ndarray, axis_tilt: float, axis_azimuth: float,
                    solar_zenith: np.ndarray, solar_azimuth: np.ndarray, ghi: np.ndarray,
                    dni: np.ndarray, dhi: np.ndarray, dni_extra: np.ndarray,
                    albedo: float = 0.2) -> np.ndarray:
    """Plane-of-array global irradiance of a single-axis tracker's rows held at a rotation
    [W/m^2] (a stalled or stowed row, or one turned by an offset).

    The plane of the rotation (Marion & Dobos 2013, pvlib ``calc_surface_orientation``),
    transposed by Hay & Davies: beam, the anisotropic sky diffuse and ground reflection.
    0 where the sun is down; NaN passes through.

    Parameters
    ----------
    tracker_theta : float or numpy.ndarray
        Rotation from flat [deg], positive toward the west for a north-south axis.
    axis_tilt, axis_azimuth : float
        The tracker axis [deg].
    solar_zenith, solar_azimuth : numpy.ndarray
        [deg].
    ghi, dni, dhi, dni_extra : numpy.ndarray
        [W/m^2].
    albedo : float
        Ground reflectance [-].

    References
    ----------
    Marion, W. F., Dobos, A. P. (2013), NREL/TP-6A20-58891, eqs. 1-7 (the plane of a
    rotation). Hay, J. E., Davies, J. A. (1980), Calculation of the solar radiation incident on
    an inclined surface, Proc. First Canadian Solar Radiation Data Workshop, 59-72.
    """
    plane = pvlib.tracking.calc_surface_orientation(tracker_theta, axis_tilt, axis_azimuth)
    up = np.asarray(solar_zenith) < 90.0
    irr = pvlib.irradiance.get_total_irradiance(
        plane["surface_tilt"], plane["surface_azimuth"], np.where(up, solar_zenith, 90.0),
        solar_azimuth, dni, ghi, dhi, dni_extra=dni_extra, albedo=albedo, model="haydavies")
    return np.where(up, np.asarray(irr["poa_global"], dtype=float), 0.0)


# Share of the rear irradiance blocked by the mounting structure: pvlib's default for the
# infinite-sheds model (common practice; no published source at hand).
REAR_SHADE_FACTOR = -0.02


def poa_rear(surface_tilt: float | pd.Series, surface_azimuth: float | pd.Series,
             solpos: pd.DataFrame, ghi: pd.Series, dhi: pd.Series, dni: pd.Series,
             albedo: float, gcr: float, height: float, pitch: float) -> pd.Series:
    """Irradiance on the rear of a row of modules by the infinite-sheds model [W/m^2].

    The rear is the front plane turned over: tilt 180 - β, azimuth γ + 180. The model sums the
    sky diffuse (isotropic) the rear sees between the rows, the light the ground reflects
    (shaded and sunlit ground, with the view of each restricted by the rows) and any beam
    reaching the rear, for rows on level ground far from the row ends.

    Parameters
    ----------
    surface_tilt, surface_azimuth : float or pandas.Series
        Front plane [deg]; Series for a tracker (:func:`singleaxis`).
    solpos : pandas.DataFrame
        From :func:`solar_position`.
    ghi, dhi, dni : pandas.Series
        [W/m^2].
    albedo : float
        Ground reflectance [-].
    gcr : float
        Ground coverage ratio [-].
    height, pitch : float
        Height of the row's centre above the ground and distance between rows [m].

    References
    ----------
    Mikofski, M., Darawali, R., Hamer, M., Neubert, A., Newmiller, J. (2019). Bifacial
    performance modeling in large arrays. 2019 IEEE 46th PVSC, 1282-1287 (through pvlib's
    ``bifacial.infinite_sheds``).
    """
    back_tilt = 180.0 - surface_tilt
    back_azimuth = (surface_azimuth + 180.0) % 360.0
    out = pvlib.bifacial.infinite_sheds.get_irradiance_poa(
        back_tilt, back_azimuth, solpos["apparent_zenith"], solpos["azimuth"], gcr, height,
        pitch, ghi, dhi, dni, albedo, model="isotropic")
    return out["poa_global"].fillna(0.0).where(ghi.notna())


def bifacial_effective(poa_front_effective: pd.Series, poa_rear: pd.Series,
                       bifaciality: float, shade_factor: float = REAR_SHADE_FACTOR
                       ) -> pd.Series:
    """Irradiance that reaches the cells of a bifacial module, front and rear [W/m^2].

    E = E_front + φ (1 + f_shade) E_rear: the rear counts at the bifaciality φ (rear over front
    efficiency at standard conditions), less the share the mounting structure shades.

    References
    ----------
    Mikofski, M. et al. (2019), 2019 IEEE 46th PVSC, 1282-1287; pvlib
    ``bifacial.infinite_sheds.get_irradiance`` (the same sum).
    """
    return poa_front_effective + bifaciality * (1.0 + shade_factor) * poa_rear


def atmosphere(solpos: pd.DataFrame, pressure: float) -> pd.DataFrame:
    """Extraterrestrial normal irradiance and air mass for a time axis.

    Returns ``dni_extra`` [W/m^2] (Spencer 1971), ``airmass_relative`` (Kasten & Young 1989)
    and ``airmass_absolute`` (scaled by ``pressure`` [Pa] / 101325).

    References
    ----------
    Spencer, J. W. (1971). Fourier series representation of the position of the sun. Search
    2(5), 172. Kasten, F., Young, A. T. (1989). Revised optical air mass tables and
    approximation formula. Applied Optics 28(22), 4735-4738.
    """
    am = pvlib.atmosphere.get_relative_airmass(solpos["apparent_zenith"], "kastenyoung1989")
    return pd.DataFrame({
        "dni_extra": extra_radiation(solpos.index),
        "airmass_relative": am,
        "airmass_absolute": pvlib.atmosphere.get_absolute_airmass(am, pressure),
    }, index=solpos.index)


def components_from_poa(poa_global: pd.Series, surface_tilt: float, surface_azimuth: float,
                        solpos: pd.DataFrame, pressure: float, albedo: float) -> pd.DataFrame:
    """GHI, DNI and DHI that explain a measured plane-of-array irradiance (GTI-DIRINT).

    Used when the array's plane differs from the sensor's and no GHI is measured: the sensor's
    irradiance is decomposed here and transposed again into the array's plane. GTI-DIRINT
    needs some times with the sun in front of the sensor (AOI < 90); without any (a stray
    night-time row) every component is NaN. DIRINT's coefficients end at a zenith-independent
    clearness index of 1, so a reading above that, as under the bright edge of a cloud, has
    no DNI or DHI from it: there the GHI is the one whose DISC split (Maxwell 1987, on which
    DIRINT builds), transposed as GTI-DIRINT does (Perez), gives the reading back within
    GTI-DIRINT's own tolerance (1 W/m^2) at a clearness index within DISC's bound
    (:func:`_components_beyond_dirint`; NaN where none does).

    Parameters
    ----------
    poa_global : pandas.Series
        Measured plane-of-array irradiance [W/m^2].
    surface_tilt, surface_azimuth : float
        Plane of the sensor [deg].
    pressure : float
        [Pa].

    References
    ----------
    Marion, B. (2015). A model for deriving the direct normal and diffuse horizontal
    irradiance from the global tilted irradiance. Solar Energy 122, 1037-1046.
    """
    aoi = pvlib.irradiance.aoi(surface_tilt, surface_azimuth, solpos["apparent_zenith"],
                               solpos["azimuth"])
    if not (aoi < 90).any():  # no sun in front of the sensor (night rows only): no estimate,
        nan = pd.Series(np.nan, index=poa_global.index)  # as GTI-DIRINT gives such rows
        return pd.DataFrame({"ghi": nan, "dni": nan, "dhi": nan})
    with warnings.catch_warnings():  # points that do not converge keep pvlib's best estimate
        warnings.simplefilter("ignore", RuntimeWarning)
        out = pvlib.irradiance.gti_dirint(poa_global, aoi, solpos["apparent_zenith"],
                                          solpos["azimuth"], poa_global.index, surface_tilt,
                                          surface_azimuth, pressure=pressure, albedo=albedo)
    out = pd.DataFrame({k: out[k].clip(lower=0.0) for k in ("ghi", "dni", "dhi")})
    beyond = (aoi < 90) & (poa_global > 0) & (out["dni"].isna() | out["dhi"].isna())
    if beyond.any():
        def at(x: Any) -> Any:  # a plane that turns (a tracker's sensor) at those rows
            return x[beyond] if isinstance(x, pd.Series) else x

        sun = solpos.loc[beyond].assign(i0=pvlib.irradiance.get_extra_radiation(
            poa_global.index[beyond], 1370, "spencer"))
        alt = _components_beyond_dirint(poa_global[beyond], at(surface_tilt),
                                        at(surface_azimuth), sun, pressure, albedo)
        back = _perez_global(alt["ghi"], alt["dni"], alt["dhi"], at(surface_tilt),
                             at(surface_azimuth), sun, pressure, albedo)
        # kept where it gives the reading back within GTI-DIRINT's own tolerance (1 W/m^2)
        # at a clearness index within DISC's bound (2, pvlib's max_clearness_index; the
        # horizontal extraterrestrial irradiance taken at cos z >= 0.065 as there)
        cosz = np.maximum(np.cos(np.radians(sun["apparent_zenith"])), 0.065)
        good = ((back - poa_global[beyond]).abs() <= 1.0) & (alt["ghi"] <= 2.0 * sun["i0"] * cosz)
        out.loc[good[good].index] = alt[good].to_numpy()
    return out


def _perez_global(ghi: pd.Series, dni: pd.Series, dhi: pd.Series, surface_tilt: float,
                  surface_azimuth: float, sun: pd.DataFrame, pressure: float,
                  albedo: float) -> pd.Series:
    """Plane-of-array global irradiance by Perez as GTI-DIRINT transposes (its extra-
    terrestrial irradiance ``sun["i0"]`` and Kasten's 1966 air mass at the site's pressure)."""
    zen = sun["apparent_zenith"]
    airmass = pvlib.atmosphere.get_absolute_airmass(
        pvlib.atmosphere.get_relative_airmass(zen, model="kasten1966"), pressure)
    return pvlib.irradiance.get_total_irradiance(
        surface_tilt, surface_azimuth, zen, sun["azimuth"], dni, ghi, dhi, dni_extra=sun["i0"],
        airmass=airmass, albedo=albedo, model="perez")["poa_global"]


def _components_beyond_dirint(poa_global: pd.Series, surface_tilt: float,
                              surface_azimuth: float, sun: pd.DataFrame, pressure: float,
                              albedo: float, iterations: int = 20) -> pd.DataFrame:
    """GHI, DNI and DHI whose plane irradiance, DISC split and Perez transposed as in
    GTI-DIRINT (:func:`_perez_global`), is ``poa_global``: the GHI scaled by the reading over
    the transposed value until they agree (the transposition is nearly proportional to the
    GHI at a given sun; the split moves slowly with it), starting from the reading itself."""
    zen = sun["apparent_zenith"]
    ghi = poa_global.astype(float)
    for _ in range(iterations):
        split = decompose(ghi, zen, "disc", pressure)
        poa = _perez_global(ghi, split["dni"], split["dhi"], surface_tilt, surface_azimuth, sun,
                            pressure, albedo)
        ghi = (ghi * poa_global / poa).where(poa > 0, ghi)
    split = decompose(ghi, zen, "disc", pressure)
    return pd.DataFrame({"ghi": ghi, "dni": split["dni"], "dhi": split["dhi"]})


# --------------------------------------------------------------------------------------------
# temperature

# King, Boyson & Kratochvil 2004, SAND2004-3535, table 1: (a, b, deltaT) for
# T_m = E exp(a + b WS) + T_a and T_c = T_m + E/1000 deltaT, WS at 10 m.
SAPM_TABLE: dict[str, tuple[float, float, float]] = {
    "glass_glass/open_rack": (-3.47, -0.0594, 3.0),
    "glass_glass/close_roof": (-2.98, -0.0471, 1.0),
    "glass_polymer/open_rack": (-3.56, -0.0750, 3.0),
    "glass_polymer/insulated_back": (-2.81, -0.0455, 0.0),
}
# The table has no row for two of our combinations; the mounting dominates the heat loss, so
# each takes the row of the same mounting with the other back sheet (our choice, no source).
SAPM_SUBSTITUTES = {
    "glass_polymer/close_roof": "glass_glass/close_roof",
    "glass_glass/insulated_back": "glass_polymer/insulated_back",
}


def sapm_parameters(mounting: str, construction: str) -> tuple[float, float, float]:
    """(a, b, deltaT) of King et al. 2004, table 1, for a mounting and a construction.

    Parameters
    ----------
    mounting : str
        ``open_rack``, ``close_roof`` or ``insulated_back``.
    construction : str
        ``glass_glass`` or ``glass_polymer``.

    References
    ----------
    King, D. L., Boyson, W. E., Kratochvil, J. A. (2004). Photovoltaic array performance model.
    SAND2004-3535, Sandia National Laboratories, table 1 (eqs. 11-12).
    """
    key = f"{construction}/{mounting}"
    return SAPM_TABLE[SAPM_SUBSTITUTES.get(key, key)]


def cell_temperature(poa_global: pd.Series, temp_air: pd.Series, wind_speed: pd.Series,
                     mounting: str = "open_rack", construction: str = "glass_polymer",
                     model: str = "sapm", temp_module: pd.Series | None = None) -> pd.Series:
    """Cell temperature from back-of-module temperature where measured, else from weather.

    With a measured back-of-module temperature T_m: T_c = T_m + E/1000 ΔT (King et al. 2004,
    eq. 12), ΔT from the SAPM table for the mounting. Where it is missing (or not measured):
    ``sapm``: T_m = E exp(a + b WS) + T_a (eq. 11) then eq. 12; ``faiman``:
    T_c = T_a + E/(U0 + U1 WS), U0 25.0 W/(m^2 K), U1 6.84 W s/(m^3 K) (Faiman 2008).

    Parameters
    ----------
    poa_global : pandas.Series
        Plane-of-array irradiance [W/m^2].
    temp_air : pandas.Series
        Ambient temperature [C].
    wind_speed : pandas.Series
        Wind speed [m/s] (SAPM: at 10 m).
    mounting, construction : str
        See :func:`sapm_parameters`.
    model : str
        ``sapm`` or ``faiman``.
    temp_module : pandas.Series, optional
        Measured back-of-module temperature [C].

    References
    ----------
    King, D. L., Boyson, W. E., Kratochvil, J. A. (2004). SAND2004-3535, eqs. 11-12, table 1.
    Faiman, D. (2008). Assessing the outdoor operating temperature of photovoltaic modules.
    Prog. Photovolt. 16(4), 307-315, eq. 8 (from memory).
    """
    a, b, delta_t = sapm_parameters(mounting, construction)
    if model == "sapm":
        est = pvlib.temperature.sapm_cell(poa_global, temp_air, wind_speed, a, b, delta_t)
    elif model == "faiman":
        est = pvlib.temperature.faiman(poa_global, temp_air, wind_speed)
    else:
        raise ValueError(f"unknown temperature model {model!r}")
    if temp_module is None:
        return est
    from_module = pvlib.temperature.sapm_cell_from_module(temp_module, poa_global, delta_t)
    return from_module.fillna(est)


def poa_from_module_temperature(temp_module: pd.Series, temp_air: pd.Series,
                                wind_speed: pd.Series, a: float, b: float) -> pd.Series:
    """Plane-of-array irradiance [W/m^2] that a back-of-module temperature implies.

    King et al. 2004, eq. 11, T_m = E exp(a + b WS) + T_a, solved for E:
    E = (T_m - T_a) / exp(a + b WS). Steady state: the module lags the irradiance by some
    minutes, so the estimate is meant for sums over a day, not single intervals.

    Parameters
    ----------
    temp_module : pandas.Series
        Back-of-module temperature [C].
    temp_air : pandas.Series
        Ambient temperature [C].
    wind_speed : pandas.Series
        Wind speed [m/s] (at 10 m).
    a, b : float
        SAPM coefficients [-] and [s/m] (:func:`sapm_parameters`).

    References
    ----------
    King, D. L., Boyson, W. E., Kratochvil, J. A. (2004). SAND2004-3535, eq. 11, table 1.
    """
    return (temp_module - temp_air) / np.exp(a + b * wind_speed)


# --------------------------------------------------------------------------------------------
# DC and AC


def age_factor(times: pd.DatetimeIndex, commissioned: dt.date,
               rate_pct_per_year: float) -> np.ndarray:
    """Age allowance (1 - r)^years since commissioning (1 before it) [-].

    Parameters
    ----------
    times : pandas.DatetimeIndex
        UTC instants.
    commissioned : datetime.date
        Commissioning date (taken at 00:00 UTC).
    rate_pct_per_year : float
        Degradation allowance [%/year].
    """
    start = pd.Timestamp(commissioned, tz="UTC")
    years = ((times - start) / pd.Timedelta(days=365.25)).to_numpy(dtype=float)
    return (1.0 - rate_pct_per_year / 100.0) ** np.clip(years, 0.0, None)


def dc_power(effective_irradiance: pd.Series, temp_cell: pd.Series, pdc0: float,
             gamma_pdc: float, loss_factor: float | np.ndarray = 1.0) -> pd.Series:
    """DC power by the linear temperature model of Dobos 2014, with design losses.

    P = P_dc0 · G_eff/1000 · (1 + γ (T_c - 25)) · f_loss.

    Parameters
    ----------
    effective_irradiance : pandas.Series
        Irradiance reaching the cells [W/m^2].
    temp_cell : pandas.Series
        Cell temperature [C].
    pdc0 : float
        DC rating at 1000 W/m^2 and 25 C [W].
    gamma_pdc : float
        Temperature coefficient of power [1/C], e.g. -0.0037.
    loss_factor : float or numpy.ndarray
        Product of (1 - loss) over the DC losses and the age allowance [-].

    References
    ----------
    Dobos, A. P. (2014). NREL technical report on a simple yield model, NREL/TP-6A20-62641,
    eq. 1 (report number from memory).
    """
    return pdc0 * effective_irradiance / 1000.0 * (1.0 + gamma_pdc * (temp_cell - 25.0)) \
        * loss_factor


# cell technologies with a spectral correction: the site file's name -> pvlib's module type
SPECTRAL_TECHNOLOGIES = {"mono_si": "monosi", "multi_si": "multisi", "cdte": "cdte",
                         "cigs": "cigs", "a_si": "asi"}
LOW_LIGHT_IRRADIANCE = 200.0  # [W/m^2] where a datasheet states the low-light efficiency


def spectral_factor_lee_panchula(airmass_absolute: pd.Series, technology: str,
                                 precipitable_water: float) -> pd.Series:
    """Spectral factor of a cell technology against the AM1.5 reference spectrum [-].

    M = c0 + c1 AMa + c2 W + c3 sqrt(AMa) + c4 sqrt(W) + c5 AMa/sqrt(W), with the technology's
    coefficients (pvlib's ``spectral_factor_firstsolar``, air mass limited to 10); 1 where the
    sun is down (air mass NaN).

    Parameters
    ----------
    airmass_absolute : pandas.Series
        Pressure-corrected air mass [-].
    technology : str
        A key of :data:`SPECTRAL_TECHNOLOGIES`.
    precipitable_water : float
        Atmospheric precipitable water [cm].

    References
    ----------
    Lee, M., Panchula, A. (2016). Spectral correction for photovoltaic module performance based
    on air mass and precipitable water. Proc. 43rd IEEE PVSC, 1351-1356.
    """
    am = airmass_absolute.to_numpy(dtype=float)
    day = np.isfinite(am)
    out = np.ones(len(am))
    if day.any():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # pvlib warns when it limits the air mass
            out[day] = pvlib.spectrum.spectral_factor_firstsolar(
                np.full(int(day.sum()), precipitable_water), am[day],
                SPECTRAL_TECHNOLOGIES[technology])
    return pd.Series(out, index=airmass_absolute.index)


def relative_efficiency_low_light(effective_irradiance: pd.Series, low_light_loss_pct: float
                                  ) -> pd.Series:
    """Module efficiency relative to its value at 1000 W/m^2 [-], logarithmic in irradiance.

    eta_rel = 1 + k ln(G/1000), k = (L/100)/ln(1000/200), so that the efficiency at 200 W/m^2
    is L percent below its STC value (the figure module datasheets state, EN 50380); 1 at and
    above 1000 W/m^2, never below 0.

    Parameters
    ----------
    effective_irradiance : pandas.Series
        Irradiance reaching the cells [W/m^2].
    low_light_loss_pct : float
        Relative efficiency loss at 200 W/m^2 and 25 C [%].

    References
    ----------
    Evans, D. L. (1981). Simplified method for predicting photovoltaic array output. Solar
    Energy 27(6), 555-560 (the logarithmic irradiance term; from memory).
    """
    k = low_light_loss_pct / 100.0 / math.log(1000.0 / LOW_LIGHT_IRRADIANCE)
    g = effective_irradiance.clip(lower=1e-9, upper=1000.0)
    return (1.0 + k * np.log(g / 1000.0)).clip(lower=0.0)


def stc_equivalent_irradiance(effective_irradiance: pd.Series, spectral_factor: pd.Series | float,
                              low_light_loss_pct: float) -> pd.Series:
    """The irradiance at which the module, at its STC efficiency, makes the power it makes
    under ``effective_irradiance`` [W/m^2]: the spectral factor, then the relative
    efficiency at the irradiance that reaches the cells (:func:`relative_efficiency_low_light`).
    """
    g = effective_irradiance * spectral_factor
    if low_light_loss_pct == 0:
        return g
    return g * relative_efficiency_low_light(g, low_light_loss_pct)


def part_load_efficiency(pdc: pd.Series | np.ndarray, pdc0: float, eta_inv_nom: float,
                         eta_inv_ref: float = 0.9637) -> np.ndarray:
    """Inverter efficiency at part load by the curve of Dobos 2014 [-].

    η = (η_nom/η_ref)(-0.0162 ζ - 0.0059/ζ + 0.9858), ζ = P_dc/P_dc0, P_dc0 = P_ac0/η_nom;
    0 where the formula goes negative (below the inverter's start) and where P_dc ≤ 0.

    Parameters
    ----------
    pdc : array-like
        DC input power [W].
    pdc0 : float
        DC input at the AC rating, P_ac0/η_nom [W].
    eta_inv_nom : float
        Nominal efficiency [-].
    eta_inv_ref : float
        Reference efficiency of the curve [-].

    References
    ----------
    Dobos, A. P. (2014). NREL technical report on a simple yield model, NREL/TP-6A20-62641,
    eqs. 10-11 (report and equation numbers from memory).
    """
    pdc = np.asarray(pdc, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        zeta = pdc / pdc0
        eta = eta_inv_nom / eta_inv_ref * (-0.0162 * zeta - 0.0059 / zeta + 0.9858)
    return np.where(pdc > 0, np.clip(eta, 0.0, None), np.where(np.isnan(pdc), np.nan, 0.0))


def ac_power(pdc: pd.Series, pac0: float, eta_inv_nom: float, night_tare: float = 0.0
             ) -> pd.DataFrame:
    """AC power of an inverter: unlimited (``ac_potential``) and clipped at the rating (``ac``).

    P_ac,potential = η(ζ) P_dc (:func:`part_load_efficiency`); P_ac = min(P_ac,potential,
    P_ac0); where the inverter does not run (no AC output) both are -``night_tare``.

    Parameters
    ----------
    pdc : pandas.Series
        DC power [W].
    pac0 : float
        AC rating [W].
    eta_inv_nom : float
        Nominal efficiency [-].
    night_tare : float
        Consumption when not operating [W].

    References
    ----------
    Dobos, A. P. (2014). NREL technical report on a simple yield model, NREL/TP-6A20-62641
    (report number from memory).
    """
    pot = part_load_efficiency(pdc, pac0 / eta_inv_nom, eta_inv_nom) * np.asarray(pdc)
    off = pot <= 0
    pot = np.where(off, -night_tare, pot)
    return pd.DataFrame({"ac_potential": pot, "ac": np.minimum(pot, pac0)}, index=pdc.index)


def export_limited(ac: pd.DataFrame, limit: float | None) -> pd.DataFrame:
    """Share a plant export limit among inverters, pro rata to their output.

    Where the sum of the (positive) inverter outputs exceeds ``limit``, each is scaled by
    limit/sum, which is what a plant controller that curtails all inverters alike delivers.

    Parameters
    ----------
    ac : pandas.DataFrame
        AC power per inverter, one column each [W].
    limit : float or None
        Export limit at the grid connection [W]; None: no limit.
    """
    if limit is None:
        return ac
    total = ac.clip(lower=0.0).sum(axis=1)
    scale = np.where(total > limit, limit / total.where(total > 0, 1.0), 1.0)
    return ac.where(ac <= 0, ac.mul(scale, axis=0))


# --------------------------------------------------------------------------------------------
# clear sky


def clearsky(solpos: pd.DataFrame, latitude: float, longitude: float, altitude: float,
             airmass_absolute: pd.Series, dni_extra: pd.Series) -> pd.DataFrame:
    """Clear-sky GHI and DNI by Ineichen & Perez 2002 with the monthly Linke turbidity that
    pvlib ships.

    Falls back to Haurwitz (1945) for GHI, with DNI unknown (NaN), when the turbidity table
    cannot be read.

    Parameters
    ----------
    solpos : pandas.DataFrame
        From :func:`solar_position`.
    latitude, longitude, altitude : float
        Site [deg, deg, m].
    airmass_absolute : pandas.Series
        Pressure-corrected air mass [-].
    dni_extra : pandas.Series
        [W/m^2].

    Returns
    -------
    pandas.DataFrame
        ``ghi``, ``dni`` [W/m^2].

    References
    ----------
    Ineichen, P., Perez, R. (2002). A new airmass independent formulation for the Linke
    turbidity coefficient. Solar Energy 73(3), 151-157.
    Remund, J., Wald, L., Lefevre, M., Ranchin, T., Page, J. (2003). Worldwide Linke turbidity
    information. Proc. ISES Solar World Congress (the monthly table).
    Haurwitz, B. (1945). Insolation in relation to cloudiness and cloud density. J. Meteorol.
    2, 154-166.
    """
    times = solpos.index
    try:
        # the table is monthly, interpolated by UTC day of year: looked up once per day
        tl = pd.Series(per_utc_day(times, lambda days: pvlib.clearsky.lookup_linke_turbidity(
            days, latitude, longitude)), index=times)
    except (OSError, ImportError, KeyError):
        ghi = pvlib.clearsky.haurwitz(solpos["apparent_zenith"])["ghi"]
        return pd.DataFrame({"ghi": ghi, "dni": np.nan}, index=times)
    out = pvlib.clearsky.ineichen(solpos["apparent_zenith"], airmass_absolute, tl, altitude,
                                  dni_extra)
    known = solpos["apparent_zenith"].notna()
    return pd.DataFrame({k: out[k].fillna(0.0).where(known) for k in ("ghi", "dni")})
