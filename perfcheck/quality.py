"""Quality: flags stored beside the readings, never deletions.

``run(con, site)`` recomputes the table ``flags(ts, quantity, device, flag, detail)`` from all
stored readings, in DuckDB SQL (stuck runs and gaps from each channel's readings in time order,
followed in NumPy by :func:`runs_and_gaps`):

``out_of_range``
    A value outside the physically possible range of its quantity (table ``LIMITS`` below and
    :func:`channel_limits`); irradiance upper limits follow the sun (Long & Dutton 2002).
``stuck``
    The same value, unchanged, over at least :data:`STUCK_MINUTES` of daylight (sun more than
    :data:`DAY_ELEVATION_DEG` up), and a run so long that, were the channel's daylight steps
    to repeat independently at its own observed repeat rate p, a run like it would occur
    anywhere in its record with a chance below :data:`STUCK_CHANCE` (n * p^(k-1), n steps,
    k readings). Runs at rest (``REST_LEVEL``: zero power or irradiance, calm), power runs
    at or above :data:`CLIPPING_SHARE` of the rating (clipping, export limit) and quantities
    that accumulate in steps (energy registers, rain) are never stuck.
``gap``
    Missing intervals between two readings of a channel: one flag at the first missing
    interval; ``detail`` says how many intervals are missing and until when.
``night_offset``
    Irradiance readings with the sun more than :data:`NIGHT_ELEVATION_DEG` below the horizon
    whose magnitude exceeds the zero-offset allowance of the sensor class (``NIGHT_OFFSET_WM2``).
``power_without_irradiance``
    AC power above :data:`POWER_SHARE` of the rating while the plane-of-array (else global)
    irradiance of the same interval is below :data:`IRRADIANCE_FLOOR_WM2`, or the sun is down.

Before the flags, the stage rebuilds what changes how stored values are read: the carried
values of report-by-exception historians (:func:`carry_forward`) and the unit check with the
site file's corrections (:func:`perfcheck.units.run`).

The sun position is computed once per distinct interval mid-point by the SPA of
:func:`perfcheck.physics.solar_position`, and kept for the model of the same command
(:class:`perfcheck.physics.SunPositions`): both stages see the same sun.

References
----------
Long, C. N. and Dutton, E. G. (2002). BSRN Global Network recommended QC tests, V2.0.
    Physically possible limits. (From memory.)
Reda, I. and Andreas, A. (2004). Solar position algorithm for solar radiation applications.
    NREL/TP-560-34302.
ISO 9060:2018, Solar energy - Specification and classification of instruments for measuring
    hemispherical solar and direct solar radiation: zero offset a (response to 200 W/m^2 net
    thermal radiation) class A 7, class B 15, class C 30 W/m^2. (From memory.)
WMO Archive of Weather and Climate Extremes: lowest air temperature -89.2 C (Vostok, 1983),
    highest 56.7 C (Death Valley, 1913), highest gust 113.2 m/s (Barrow Island, 1996),
    greatest 60-minute rainfall 305 mm (Holt, 1947). (From memory.)
"""

from __future__ import annotations

import re

import duckdb
import numpy as np
import pandas as pd

from perfcheck import db, ingest, physics, units
from perfcheck.site import Site

# Fixed physical limits per stored quantity [unit of the quantity], lower and upper; None: no
# fixed limit on that side. Power and energy limits scale with the device's rating
# (channel_limits); irradiance upper limits follow the sun (sql/quality_out_of_range.sql).
LIMITS: dict[str, tuple[float | None, float | None]] = {
    # BSRN physically possible minimum for GHI, DHI, DNI (Long & Dutton 2002, from memory);
    # applied to POA too.
    "poa_wm2": (-4.0, None),
    "poa_rear_wm2": (-4.0, None),
    "ghi_wm2": (-4.0, None),
    "dhi_wm2": (-4.0, None),
    "dni_wm2": (-4.0, None),
    # WMO world extremes of air temperature (from memory)
    "temp_air_c": (-89.2, 56.7),
    # ambient record low; a module in full sun runs some 30-40 C above ambient, so 100 C is
    # beyond any working module (common practice)
    "temp_module_c": (-89.2, 100.0),
    # WMO highest gust (from memory)
    "wind_speed_ms": (0.0, 113.2),
    # WMO greatest 60-minute rainfall (from memory); per interval of up to 60 min
    "rain_mm": (0.0, 305.0),
    "energy_register_wh": (0.0, None),
    # a tracker turns at most a right angle either way from flat (geometry)
    "tracker_angle_deg": (-90.0, 90.0),
}
# Power may exceed the AC rating by this factor at most (inverter overload headroom, cold
# weather): common practice. Negative down to this share of the rating (night consumption).
POWER_OVER = 1.1
POWER_UNDER = -0.05
# DC power: up to 1.5 x DC nameplate (cloud enhancement and cold cells; common practice).
DC_OVER = 1.5

STUCK_MINUTES = 60  # at least this long, and at least STUCK_MIN_INTERVALS intervals
STUCK_MIN_INTERVALS = 3
STUCK_CHANCE = 0.01  # a run this long anywhere in the channel's record, by chance
# Accumulate in steps of their resolution; a tracker holds still at its limit, flat at night
# and in stow by design (a stalled tracker is a detector's question, not a flag of the data).
NEVER_STUCK = ("energy_register_wh", "rain_mm", "tracker_angle_deg")
DAY_ELEVATION_DEG = 5.0  # sun above this: quantities should vary
CLIPPING_SHARE = 0.95  # power runs at or above this share of the rating are not stuck
NIGHT_ELEVATION_DEG = -6.0  # end of civil twilight: no sunlight reaches a sensor
NIGHT_OFFSET_WM2 = {"A": 7.0, "B": 15.0, "C": 30.0}  # ISO 9060:2018 zero offset a (from memory)
POWER_SHARE = 0.05  # of the AC rating (common practice)
IRRADIANCE_FLOOR_WM2 = 10.0  # below this, DC output is about 1 % of nameplate

FLAG_NAMES = ("out_of_range", "stuck", "gap", "night_offset", "power_without_irradiance")
# The queries that write them (sql/quality_<name>.sql): stuck and gap share one sort.
FLAG_QUERIES = ("out_of_range", "stuck_gap", "night_offset", "power_without_irradiance")
IRRADIANCE = ("poa_wm2", "poa_rear_wm2", "ghi_wm2", "dhi_wm2", "dni_wm2")
# Levels at or below which a quantity is at rest and may hold still: zero for power, energy and
# irradiance; 0.5 m/s for wind, about the starting threshold of a cup anemometer (from memory).
REST_LEVEL = {"ac_power_w": 0.0, "dc_power_w": 0.0, "energy_interval_wh": 0.0, "poa_wm2": 0.0,
              "poa_rear_wm2": 0.0,
              "ghi_wm2": 0.0, "dhi_wm2": 0.0, "dni_wm2": 0.0, "wind_speed_ms": 0.5}


def channel_limits(site: Site, intervals: dict[tuple[str, str], int]) -> pd.DataFrame:
    """One row per logged channel: its interval, rating and fixed range.

    ``intervals`` is the logging interval [s] per (quantity, device), as stored at ingest
    (:func:`perfcheck.ingest.channel_intervals`).

    Columns: quantity, device, interval_min, rating_w (AC rating of the inverter, or of the
    plant: sum of ratings, capped by the export limit; missing for weather), lo, hi (missing:
    no limit), rest_level (at or below it the quantity may hold still; missing: none).
    """
    known = {"site", "plant"} | {inv.id for inv in site.inverters}
    out = []
    for (quantity, device), seconds in sorted(intervals.items()):
        if device not in known:  # an inverter no longer in the site file has no rating
            continue
        if quantity == "status_code":  # a logger's own codes, not a measurement
            continue
        interval = seconds // 60
        rating = _rating_w(site, device)
        dc = _dc_w(site, device)
        lo, hi = LIMITS.get(quantity, (None, None))
        if quantity == "ac_power_w":
            lo, hi = POWER_UNDER * rating, POWER_OVER * rating
        elif quantity == "dc_power_w":
            lo, hi = POWER_UNDER * dc, DC_OVER * dc
        elif quantity == "energy_interval_wh":
            lo, hi = POWER_UNDER * rating * interval / 60, POWER_OVER * rating * interval / 60
        out.append((quantity, device, interval, rating, lo, hi, REST_LEVEL.get(quantity)))
    frame = pd.DataFrame(out, columns=["quantity", "device", "interval_min", "rating_w",
                                       "lo", "hi", "rest_level"])
    # nullable floats: a missing limit reaches SQL as NULL, not NaN
    return frame.astype({"interval_min": "int64",
                         **{c: "Float64" for c in ("rating_w", "lo", "hi", "rest_level")}})


def _rating_w(site: Site, device: str) -> float:
    if device == "site":
        return float("nan")
    if device == "plant":
        total = site.ac_kw
        if site.export_limit_kw is not None:
            total = min(total, site.export_limit_kw)
        return 1e3 * total
    return 1e3 * site.inverter(device).ac_kw


def _dc_w(site: Site, device: str) -> float:
    if device == "site":
        return float("nan")
    if device == "plant":
        return 1e3 * site.dc_kwp
    return 1e3 * site.inverter(device).dc_kwp


def sun_table(sun: physics.SunPositions, starts: pd.DatetimeIndex, interval_min: int
              ) -> pd.DataFrame:
    """Sun at the mid-point of each interval starting at ``starts`` (UTC), kept in ``sun``
    for the model of the same command.

    Returns columns ts (interval start), interval_min, elevation_deg (apparent, refracted),
    mu0 (cosine of the zenith, 0 when the sun is down) and sa_wm2 (extraterrestrial normal
    irradiance for the day, pvlib's ``get_extra_radiation``, Spencer 1971).
    """
    mid = physics.interval_midpoints(starts, 60.0 * interval_min)
    pos = sun.keep(mid)
    zenith = pos["apparent_zenith"].to_numpy()
    return pd.DataFrame({
        "ts": starts,
        "interval_min": np.int32(interval_min),
        "elevation_deg": pos["apparent_elevation"].to_numpy(),
        "mu0": np.clip(np.cos(np.radians(zenith)), 0.0, None),
        "sa_wm2": physics.extra_radiation(mid).to_numpy(),
    })


def sun_positions(site: Site) -> physics.SunPositions:
    """The sun of ``site`` for one command (its quality stage and its model)."""
    return physics.SunPositions(site.latitude_deg, site.longitude_deg, site.altitude_m)


def _sun_for_readings(con: duckdb.DuckDBPyConnection, sun: physics.SunPositions,
                      channels: pd.DataFrame) -> pd.DataFrame:
    frames = []
    for interval, chans in channels.groupby("interval_min"):
        # every stored value, also those the unit check leaves out
        ts = ingest.channel_instants(con, chans["channel_id"].tolist())
        if len(ts):
            frames.append(sun_table(sun, ts, int(interval)))
    if not frames:
        return sun_table(sun, pd.DatetimeIndex([], tz="UTC"), 5)
    return pd.concat(frames, ignore_index=True)


def runs_and_gaps(con: duckdb.DuckDBPyConnection, channels: pd.DataFrame, sun: pd.DataFrame
                  ) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """What the stuck and gap flags (``sql/quality_stuck_gap.sql``) need from each channel's
    readings in time order: (runs, rates, gaps).

    ``runs``: the readings that can belong to a stuck run (ts, channel_id, value, day: the sun
    above :data:`DAY_ELEVATION_DEG` at the interval's mid-point, run_id: equal for a stretch of
    equal values), that is those neither at rest (at or below the channel's rest_level, a
    property of the value and so of a whole run) nor of a quantity that is never stuck, and
    not a run of one reading unless :data:`STUCK_MIN_INTERVALS` allows it. ``rates``: per
    channel that can be stuck, its daylight readings not at rest (steps) and those of them
    equal to the reading before (repeats). ``gaps``: each reading followed by a gap of more
    than 1.5 intervals (ts, next_ts, channel_id).

    ``channels``: :func:`channel_limits` with the channel ids; ``sun``: :func:`sun_table` of
    the readings' instants. One channel's readings at a time, in NumPy: one pass over each
    channel instead of a sort of all readings by channel and time.
    """
    runs, rates, gaps = [], [], []
    sun_us = sun["ts"].to_numpy(dtype="datetime64[us]").view(np.int64)
    last: tuple[int, np.ndarray, np.ndarray] | None = None  # interval, instants, their day
    for c in channels.itertuples(index=False):
        got = con.execute("SELECT ts, value FROM readings WHERE channel_id = ?",
                          [int(c.channel_id)]).fetchnumpy()
        ts = got["ts"].astype("datetime64[us]").view(np.int64)
        value = np.asarray(got["value"], dtype=float)
        if not len(ts):
            continue
        if (ts[1:] < ts[:-1]).any():
            order = np.argsort(ts, kind="stable")
            ts, value = ts[order], value[order]
        step = ts[1:] - ts[:-1]
        after = np.flatnonzero(step > 90_000_000 * int(c.interval_min))  # 1.5 intervals [us]
        gaps.append(pd.DataFrame({"ts": ts[after], "next_ts": ts[after + 1],
                                  "channel_id": c.channel_id}))
        if c.quantity in NEVER_STUCK:
            continue
        # IS NOT DISTINCT FROM: NaN equals NaN
        same = (value[1:] == value[:-1]) | (np.isnan(value[1:]) & np.isnan(value[:-1]))
        starts = np.concatenate(([True], ~same))
        repeats_next = np.concatenate((same, [False]))
        at_rest = np.zeros(len(value), dtype=bool) if pd.isna(c.rest_level) \
            else np.abs(value) <= float(c.rest_level)
        # the channels of one logger share their instants: their sun is looked up once
        if last is None or last[0] != c.interval_min or not np.array_equal(last[1], ts):
            mine = (sun["interval_min"] == c.interval_min).to_numpy()
            own, elevation = sun_us[mine], sun["elevation_deg"].to_numpy()[mine]
            at = np.minimum(np.searchsorted(own, ts), max(len(own) - 1, 0))
            last = c.interval_min, ts, (own[at] == ts) & (elevation[at] > DAY_ELEVATION_DEG) \
                if len(own) else np.zeros(len(ts), dtype=bool)
        day = last[2]
        steps = day & ~at_rest
        rates.append((c.channel_id, int((steps & ~starts).sum()), int(steps.sum())))
        keep = ~at_rest & (~starts | repeats_next | (STUCK_MIN_INTERVALS < 2))
        runs.append(pd.DataFrame({
            "ts": ts[keep], "channel_id": c.channel_id, "value": value[keep], "day": day[keep],
            "run_id": np.cumsum(starts)[keep]}))
    frames = []
    for parts, columns in ((runs, {"ts": np.int64, "channel_id": np.int64, "value": float,
                                   "day": bool, "run_id": np.int64}),
                           (gaps, {"ts": np.int64, "next_ts": np.int64, "channel_id": np.int64})):
        frame = pd.concat(parts, ignore_index=True) if parts \
            else pd.DataFrame({k: pd.Series([], dtype=t) for k, t in columns.items()})
        for k in ("ts", "next_ts"):
            if k in frame:
                frame[k] = pd.to_datetime(frame[k], unit="us", utc=True)
        frames.append(frame)
    rates_frame = pd.DataFrame(rates, columns=["channel_id", "repeats", "steps"]).astype(
        {"channel_id": channels["channel_id"].dtype, "repeats": np.int64, "steps": np.int64})
    return frames[0], rates_frame, frames[1]


def carry_forward(con: duckdb.DuckDBPyConnection, site: Site) -> None:
    """Rebuild ``carried_values`` (sql/quality_carry.sql) for the historian loggers with
    ``carry_forward_min`` (report-by-exception data), inside the caller's transaction; when
    they change, the model and the alignment recompute the files concerned."""
    con.execute("CREATE OR REPLACE TEMP TABLE _carried_before AS FROM carried_values")
    con.execute("DELETE FROM carried_values")
    for lg in site.loggers:
        if lg.carry_forward_min is not None:
            con.execute(db.sql("quality_carry"), {"logger": lg.name, "iv": 60 * lg.interval_min,
                                                  "limit": 60 * lg.carry_forward_min})
    first = con.execute("SELECT min(file_id) FROM ((FROM _carried_before EXCEPT ALL FROM "
                        "carried_values) UNION ALL (FROM carried_values EXCEPT ALL FROM "
                        "_carried_before))").fetchone()[0]
    con.execute("DROP TABLE _carried_before")
    if first is not None:
        units.recompute_from(con, int(first))


def stale(con: duckdb.DuckDBPyConnection, site: Site | None = None) -> bool:
    """True when files were ingested after the flags were last computed (a run killed
    between a file's commit and the flags' commit, or flags never computed), or, given the
    site, when the settings that change how stored values are read (``[[corrections]]``,
    ``carry_forward_min``) changed since the stage last ran."""
    newest, state = con.execute("SELECT (SELECT max(file_id) FROM source_files), "
                                "(SELECT max(last_file_id) FROM quality_state)").fetchall()[0]
    return newest is not None and (newest != state or (
        site is not None and not units.current(con, site)))


def run(con: duckdb.DuckDBPyConnection, site: Site, sun: physics.SunPositions | None = None
        ) -> dict[str, int]:
    """Recompute the carried values, the unit check (:func:`perfcheck.units.run`) and all
    flags from the stored readings, in one transaction that also records the newest file they
    include (see :func:`stale`); returns the count per flag name. The sun at the readings is
    kept in ``sun`` (default: :func:`sun_positions` of ``site``)."""
    channels = channel_limits(site, ingest.channel_intervals(con)).merge(
        con.execute("SELECT quantity, device, channel_id FROM channels").df(),
        on=["quantity", "device"])
    table = _sun_for_readings(con, sun or sun_positions(site), channels)
    params = {
        "stuck_minutes": STUCK_MINUTES,
        "stuck_min_intervals": STUCK_MIN_INTERVALS,
        "clipping_share": CLIPPING_SHARE,
        "stuck_chance": STUCK_CHANCE,
        "night_elevation": NIGHT_ELEVATION_DEG,
        "night_offset_wm2": NIGHT_OFFSET_WM2[site.model.sensor_class],
        "irradiance": list(IRRADIANCE),
        "power_share": POWER_SHARE,
        "irradiance_floor": IRRADIANCE_FLOOR_WM2,
    }
    with db.registered(con, _quality_channels=channels, _quality_sun=table):
        with db.transaction(con):
            carry_forward(con, site)
            units.run(con, site)  # before the flags: they read corrected values
            # the readings as the flags read them: carried and corrected in this transaction
            runs, rates, gaps = runs_and_gaps(con, channels, table)
            con.execute("DELETE FROM flags")
            with db.registered(con, _quality_runs=runs, _quality_rates=rates,
                               _quality_gaps=gaps):
                for name in FLAG_QUERIES:
                    query = db.sql(f"quality_{name}")
                    used = {k: v for k, v in params.items() if re.search(rf"\${k}\b", query)}
                    con.execute(query, used)
            con.execute("DELETE FROM quality_state")
            con.execute("INSERT INTO quality_state SELECT max(file_id) FROM source_files")
        counts = dict(con.execute("SELECT flag, count(*) FROM flags GROUP BY flag").fetchall())
    return {name: int(counts.get(name, 0)) for name in FLAG_NAMES}


__all__ = ["FLAG_NAMES", "LIMITS", "channel_limits", "run", "stale", "sun_positions", "sun_table"]
