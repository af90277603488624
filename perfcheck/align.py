"""Measured beside expected: the ``aligned`` table, one row per (interval, inverter).

Stage "align". Measured AC power of an inverter comes, in this order, from its mean AC power
readings, from its interval energy (divided by the logging interval), or from differences of its
energy register (:func:`register_power`). The model stores its expected values, with the sun
position and site weather, beside it, piece by piece (:func:`store`; with the expected power and
cell temperature from the modelled POA alone, ``expected_ac_modelled_w``,
``potential_ac_modelled_w`` and ``temp_cell_modelled_c``, the stand-in where the POA sensor is
suspect, and the POA sensor's own reading ``poa_sensor_wm2``, which is only part of an
inverter's plane irradiance where its arrays face several planes); the quality flags of the
readings behind each row come from the ``flags`` table through the ``aligned`` view (see
``sql/schema_30_model.sql``).

:func:`store` is called by :func:`perfcheck.model.run`; later stages read
:func:`load_aligned`.
"""

from __future__ import annotations

from typing import Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import db
from perfcheck.errors import DataError
from perfcheck.site import Site

ALIGNED_COLUMNS = (
    "ts", "inverter_id", "interval_s", "measured_ac_w", "expected_ac_w", "potential_ac_w",
    "expected_dc_w", "poa_wm2", "poa_modelled_wm2", "poa_source", "ghi_wm2", "clearsky_ghi_wm2",
    "temp_air_c", "wind_speed_ms", "temp_module_c", "temp_cell_c", "rain_mm", "sun_zenith_deg",
    "sun_azimuth_deg", "flags", "expected_ac_modelled_w", "potential_ac_modelled_w",
    "temp_cell_modelled_c", "poa_sensor_wm2",
)
# A register step above this multiple of the inverter's AC rating times the elapsed time is a
# reset or a replaced meter, not energy (physical bound with margin; common practice).
REGISTER_MAX_RATING_MULTIPLE = 1.5
# The model and the aligned rows go in pieces of whole days of fewer rows (interval x inverter)
# than a DuckDB row group (db.ROW_GROUP_ROWS: a larger INSERT leaves short row groups that the
# checkpoint at close writes again), and at least a day (:func:`piece_days`), which bounds the
# memory used; for a site-year of 1-minute rows of one inverter a piece is 85 days (measured
# there: the aligned rows written and checkpointed in 0.52 s of CPU in 85-day pieces, 0.78 s in
# 91-day ones, of which 0.31 s in the checkpoint at close; 0.57 s in 31-day ones).
# load_aligned fetches the rows in pieces of this many DuckDB vectors (2,048 rows each) and keeps
# one string object per distinct value of its text columns: a site-year of 1-minute rows holds
# three text columns of about 30 MB each as separate strings, 4 MB each as shared ones.
LOAD_VECTORS = 16
TEXT_COLUMNS = ("inverter_id", "poa_source", "flags")


def register_power(register_wh: pd.Series, register_ts: pd.Series, interval_s: float,
                   rollover_wh: float | None, pac0: float, daily_reset_tz: str | None = None
                   ) -> pd.Series:
    """Mean power between successive readings of a cumulative energy register [W].

    Each value is the register's last reading within an interval (``register_ts`` its stored
    instant). A register reading stored at an interval's start is taken as the count when that
    interval closed (a logger writes its record, and reads the register, as the interval ends);
    so the power of an interval is the step from the previous interval's last reading divided
    by the time between the two readings. A negative step is a rollover when ``rollover_wh`` is
    set (the register wraps at that value: step + rollover), or, for a register that restarts
    from zero at local midnight (``daily_reset_tz``: the site's zone), on the first reading of
    a new local day (the step is then the reading itself, the energy since midnight), else a
    reset (NaN). Steps spanning
    more than 1.5 intervals (a gap) and steps above 1.5 times the rating (``pac0`` [W]) over
    the elapsed time are NaN: their energy cannot be placed in one interval.

    Parameters
    ----------
    register_wh : pandas.Series
        Register readings [Wh], one per interval, in time order.
    register_ts : pandas.Series
        Instants of those readings (UTC).
    interval_s : float
        Interval [s].
    rollover_wh : float or None
        Value at which the register wraps to zero [Wh].
    pac0 : float
        AC rating of the inverter [W].
    daily_reset_tz : str or None
        IANA zone whose midnight restarts the register; None: it does not restart.
    """
    step = register_steps(register_wh, register_ts, rollover_wh, daily_reset_tz)
    elapsed = register_ts.diff().dt.total_seconds()
    power = step / elapsed * 3600.0
    ok = (elapsed > 0) & (elapsed <= 1.5 * interval_s) \
        & (power <= REGISTER_MAX_RATING_MULTIPLE * pac0)
    return power.where(ok)


def register_steps(register_wh: pd.Series, register_ts: pd.Series, rollover_wh: float | None,
                   daily_reset_tz: str | None = None) -> pd.Series:
    """Energy counted between successive readings of a cumulative register [Wh] (NaN for the
    first reading and for a reset).

    A negative step is a rollover when ``rollover_wh`` is set (step + rollover), or, for a
    register that restarts from zero at local midnight (``daily_reset_tz``), on the first
    reading of a new local day the reading itself; any other negative step is a reset or a
    replaced meter (NaN). Differencing a cumulative register is how an energy meter's
    readings become energy per period (common practice; IEC 62053-21 defines the register
    as the cumulative count, from memory).
    """
    step = register_wh.diff()
    if rollover_wh is not None:
        step = step.where(step >= 0, step + rollover_wh)
    if daily_reset_tz is not None:
        day = register_ts.dt.tz_convert(daily_reset_tz).dt.date
        step = step.where((step >= 0) | (day == day.shift()), register_wh)
    return step.where(step >= 0)


def measured_power(raw: pd.DataFrame, site: Site, interval_s: float,
                   energy_s: dict[str, float]) -> pd.DataFrame:
    """Measured AC power per (ts, inverter_id) from the per-interval readings of
    ``sql/align_measured.sql`` [W]: AC power, else interval energy (over its logging interval
    ``energy_s`` [s] per inverter, as stored at ingest), else register steps."""
    rollover = {c.device: c.rollover_wh for lg in site.loggers for c in lg.columns
                if c.quantity == "energy_register"}
    daily = {c.device for lg in site.loggers for c in lg.columns
             if c.quantity == "energy_register" and c.resets_daily}
    parts = []
    for inv_id, g in raw.groupby("inverter_id", sort=False):
        if inv_id not in {i.id for i in site.inverters}:
            continue
        pac0 = site.inverter(str(inv_id)).ac_kw * 1000.0
        from_energy = g["energy_interval_wh"] / (energy_s.get(inv_id, interval_s) / 3600.0)
        reg = register_power(g["register_wh"], g["register_ts"], interval_s,
                             rollover.get(inv_id), pac0,
                             site.timezone if inv_id in daily else None)
        parts.append(pd.DataFrame({
            "ts": g["ts"], "inverter_id": inv_id,
            "measured_ac_w": g["ac_power_w"].fillna(from_energy).fillna(reg),
        }))
    if not parts:
        return pd.DataFrame({"ts": pd.Series([], dtype="datetime64[us, UTC]"),
                             "inverter_id": pd.Series([], dtype=str),
                             "measured_ac_w": pd.Series([], dtype=float)})
    return pd.concat(parts, ignore_index=True)


def first_row(con: duckdb.DuckDBPyConnection, query: str, params: object = None) -> tuple | None:
    """The first row of a query, with the result consumed (DuckDB refuses other work on a
    connection while a result is still open)."""
    rows = con.execute(query, params).fetchall()
    return rows[0] if rows else None


def changed_span(con: duckdb.DuckDBPyConnection, last_file_id: int, interval_s: int
                 ) -> tuple[pd.Timestamp, pd.Timestamp] | None:
    """Interval starts [start, end) touched by readings of files after ``last_file_id``."""
    first, last = first_row(con, db.sql("align_changed_span"), {"file_id": last_file_id})
    if first is None:
        return None
    start = pd.Timestamp(first).tz_convert("UTC").floor(f"{interval_s}s")
    end = pd.Timestamp(last).tz_convert("UTC").floor(f"{interval_s}s") \
        + pd.Timedelta(seconds=interval_s)
    return start, end


def chunks(start: pd.Timestamp, end: pd.Timestamp, days: int
           ) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    """[start, end) cut into consecutive pieces of at most ``days`` days (bounded memory)."""
    edges = list(pd.date_range(start, end, freq=f"{days}D")) + [end]
    return [(a, b) for a, b in zip(edges[:-1], edges[1:], strict=True) if b > a]


def piece_days(site: Site, interval_s: int) -> int:
    """Days per piece of the model and the aligned rows: whole days of fewer rows (interval x
    inverter) than a DuckDB row group, at least one."""
    return max(1, (db.ROW_GROUP_ROWS - 1) * interval_s // (86400 * max(len(site.inverters), 1)))


def inverter_readings(con: duckdb.DuckDBPyConnection, interval_s: int, start: pd.Timestamp,
                      end: pd.Timestamp) -> pd.DataFrame:
    """The inverter readings per interval (``sql/align_measured.sql``) of the interval starts
    in [``start``, ``end``), and of the interval before (for register steps)."""
    return con.execute(db.sql("align_measured"), {
        "iv": interval_s, "start": start - pd.Timedelta(seconds=interval_s), "end": end}).df()


def store(con: duckdb.DuckDBPyConnection, site: Site, run_id: int, interval_s: int,
          energy_s: dict[str, float], expected: pd.DataFrame | None, raw: pd.DataFrame,
          start: pd.Timestamp, end: pd.Timestamp) -> None:
    """Replace the aligned rows of [``start``, ``end``) by the expected rows of run ``run_id``
    (columns ``ts``, ``inverter_id`` and those of :data:`ALIGNED_COLUMNS` that the model
    gives; None: no weather there) beside the measured power from the inverter readings
    ``raw`` (:func:`inverter_readings`; ``energy_s``: the logging interval of each inverter's
    interval energy [s])."""
    meas = measured_power(raw, site, interval_s, energy_s)
    meas = meas[meas["ts"] >= start]
    con.execute(db.sql("align_delete_span"), {"start": start, "end": end})
    if expected is None:
        expected = meas[["ts", "inverter_id"]].iloc[:0]
    # the expected frame scanned as a relation, not registered: a view dropped inside the
    # model's transaction would keep it alive until the commit (the measured one is small)
    with db.registered(con, _measured=meas):
        con.from_df(expected).query(
            "_expected", db.sql("align_build").format(iv=int(interval_s), id=int(run_id)))


def load_aligned(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp | None = None,
                 end: pd.Timestamp | None = None,
                 columns: tuple[str, ...] = ALIGNED_COLUMNS) -> pd.DataFrame:
    """The aligned rows (columns of the data contract) between ``start`` and ``end``.

    Parameters
    ----------
    con : duckdb.DuckDBPyConnection
    site : Site
    start, end : pandas.Timestamp, optional
        Tz-aware bounds; ``end`` is exclusive. Default: everything.
    columns : tuple of str, optional
        The columns of :data:`ALIGNED_COLUMNS` to load, in this order (``ts`` and
        ``inverter_id`` among them); default all. A 1-minute site-year holds some 4 MB per
        column, a copy of it while loading.

    Raises DataError when nothing has been aligned yet.
    """
    if first_row(con, "SELECT count(*) FROM align_state")[0] == 0:
        raise DataError(f"{site.path}: no expected series yet (run 'perfcheck model' first)")
    lo = pd.Timestamp("1900-01-01", tz="UTC") if start is None else _utc(start, "start")
    hi = pd.Timestamp("2200-01-01", tz="UTC") if end is None else _utc(end, "end")
    span = {"start": lo, "end": hi}
    rows = first_row(con, db.sql("align_load_rows"), span)[0]
    df = fetch_shared(con.execute(db.sql("align_load").format(columns=", ".join(columns)), span),
                      rows, tuple(c for c in TEXT_COLUMNS if c in columns))
    df["ts"] = pd.to_datetime(df["ts"], utc=True)
    for c in ("measured_ac_w", "expected_ac_w", "potential_ac_w", "expected_dc_w",
              "expected_ac_modelled_w", "potential_ac_modelled_w"):
        if c in columns:
            df[c] = df[c].astype(float)
    # the instants as datetime64 (UTC): to_numpy() of zoned ones makes a Timestamp per row
    ts, inverter = df["ts"].dt.tz_convert(None).to_numpy(), df["inverter_id"].to_numpy()
    if not _in_order(ts, inverter):  # the rows of an instant are unique per inverter
        order = np.lexsort((pd.factorize(inverter, sort=True)[0], ts))
        for c in df.columns:  # one column at a time: a sorted copy would hold the frame twice
            df[c] = df[c].array.take(order)
    return df


def fetch_shared(result: duckdb.DuckDBPyConnection, rows: int,
                 text_columns: tuple[str, ...] = TEXT_COLUMNS) -> pd.DataFrame:
    """The ``rows`` rows of a DuckDB result as ``.df()`` gives them, fetched in pieces, with one
    string object per distinct value of ``text_columns`` (``.df()`` makes one per row).

    A column of one numpy dtype (or of instants) is allocated whole and filled piece by piece:
    a concatenation would hold all pieces beside the whole (measured on the aligned rows of a
    1-minute site-year: 40 MB less at the peak). Others (a piece in another dtype, such as
    nullable integers) keep their pieces and are concatenated."""
    out: dict[str, Any] = {}  # column -> the whole array being filled, or a list of pieces
    dtypes: dict[str, Any] = {}
    pool: dict[Any, Any] = {}
    at = 0
    while len(piece := result.fetch_df_chunk(LOAD_VECTORS)):
        n = len(piece)
        for c in piece.columns:
            col = piece[c]
            part = None  # the piece's values to fill in, None: to concatenate
            if c in text_columns:
                if col.dtype != object or c not in dtypes:  # NULLs alone come as objects
                    dtypes[c] = col.dtype
                codes, values = pd.factorize(col.to_numpy(dtype=object))
                shared = np.array([pool.setdefault(v, v) for v in values] + [None], dtype=object)
                part = shared[codes]  # code -1 (NULL) takes the last: None
            elif (kept := dtypes.setdefault(c, col.dtype)) == col.dtype and (
                    isinstance(kept, pd.DatetimeTZDtype)
                    or isinstance(kept, np.dtype) and kept.kind != "O"):
                part = col.to_numpy(dtype=kept.base)  # zoned instants: their UTC datetime64
            whole = out.get(c)
            if part is not None and whole is None:
                whole = out[c] = np.empty(rows, dtype=part.dtype)
            if part is not None and isinstance(whole, np.ndarray):
                whole[at:at + n] = part
            else:
                if isinstance(whole, np.ndarray):  # from here on its pieces are concatenated
                    out[c] = [pd.Series(whole[:at], dtype=dtypes[c])]
                out.setdefault(c, []).append(col)
        at += n
    if at != rows:
        raise ValueError(f"the result has {at} rows, not {rows}")
    if not out:
        return piece
    return pd.DataFrame({c: pd.Series(v, dtype=dtypes[c], copy=False)
                         if isinstance(v, np.ndarray) else pd.concat(v, ignore_index=True)
                         for c, v in out.items()}, copy=False)


def _in_order(ts: np.ndarray, inverter_id: np.ndarray) -> bool:
    """True when the rows are ordered by time, then inverter (as DuckDB reads them back when
    they were stored in that order: the sort is then skipped)."""
    same = ts[1:] == ts[:-1]
    return bool((ts[1:] >= ts[:-1]).all()
                and (inverter_id[1:][same] > inverter_id[:-1][same]).all())


def _utc(t: pd.Timestamp, name: str) -> pd.Timestamp:
    t = pd.Timestamp(t)
    if t.tzinfo is None:
        raise ValueError(f"load_aligned: {name} must be tz-aware, got {t}")
    return t.tz_convert("UTC")


def monthly_summary(con: duckdb.DuckDBPyConnection, site: Site) -> pd.DataFrame:
    """Expected and measured AC energy per inverter and site-local month, and the plant total.

    Columns ``inverter_id`` ('plant' for the sum), ``month`` (YYYY-MM), ``expected_kwh``,
    ``measured_kwh``, ``ratio`` (measured / expected over intervals that have both),
    ``coverage`` (share of the expected energy that has a measurement).
    """
    return con.execute(db.sql("align_monthly"), {"tz": site.timezone}).df()
