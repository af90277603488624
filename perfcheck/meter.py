"""The plant's export meter: its settings, its energy per interval, and that energy on the ledger.

IEC 61724-1 defines the final system yield as the system's AC output energy, measured where
the system delivers it, per kWp (Y_f = E_out / P0), and the performance ratio as
PR = Y_f / Y_r. A plant's inverters deliver through AC cabling and usually a transformer to an
export meter, so PR at the meter is lower than at the inverters by those AC losses. When the
site file maps a meter (a logger column with ``inverter = "plant"`` and quantity
``energy_register`` or ``energy_interval``), the plant's yields and PR are at the meter and
the per-inverter figures stay at the inverters; without one, the plant is the sum of its
inverters, as before, and the check document says which basis it uses.

The meter's energy enters the ledger as ``delivered_wh`` beside each (interval, inverter)
row: each interval's meter energy shared over the inverters by their measured energy (by
their expected energy where an inverter logged nothing). A register step that spans several
intervals (a logger gap, a meter read less often) is spread over them in the shape of the
plant's expected power: energy measured by the meter, never an outage loss. So on any window
delivered = inverter output - AC losses (inverter minus meter where both exist) - inverter
output the meter did not see + meter energy where the inverters logged nothing.

The ``[meter]`` section of the site file holds ``ac_loss_pct`` (the design loss between the
inverters and the meter) and ``basis``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import align, db, ingest
from perfcheck.site import Site, Table

BASES = ("auto", "meter", "inverters")
METER_QUANTITIES = ("energy_register", "energy_interval")
# A register step or interval energy above this multiple of the plant's AC rating over its
# time is a reset or a replaced meter, not energy (as for an inverter's register; common
# practice).
MAX_RATING_MULTIPLE = align.REGISTER_MAX_RATING_MULTIPLE
# A meter step longer than this many of the meter's own intervals spans a gap in its records.
GAP_INTERVALS = 1.5


@dataclass(frozen=True)
class MeterSettings:
    """``[meter]`` of the site file, resolved against the logger columns.

    Attributes (site-file keys; all optional)
    -----------------------------------------
    ac_loss_pct : design loss between the inverters' AC terminals and the export meter [%]:
        AC cabling and the transformer (0 when not given). Common practice puts AC cabling at
        about 0.5-1 % and a medium-voltage transformer at about 1-1.5 % of the energy
        (IEC 61724-1 leaves the value to the design; IEC 60076-1 gives a transformer's
        no-load and load losses at rated power, from memory).
    basis : "auto" (the meter when a meter column exists, else the inverters), "meter" (a
        meter column is required) or "inverters" (the plant is the sum of its inverters even
        with a meter; the reconciliation is still shown)
    """

    ac_loss_pct: float
    basis: str  # resolved: "meter" or "inverters"
    channels: tuple[str, ...]  # the meter's columns in words ("column E of logger main")

    @property
    def at_meter(self) -> bool:
        return self.basis == "meter"

    @property
    def has_meter(self) -> bool:
        return bool(self.channels)

    @property
    def factor(self) -> float:
        """Share of the inverters' output that reaches the meter by design [-]."""
        return 1.0 - self.ac_loss_pct / 100.0

    def words(self) -> str:
        """Which basis the plant's figures use, in words a person reads (no code values)."""
        if self.at_meter:
            return (f"plant yields and PR at the export meter ({', '.join(self.channels)}), "
                    "where the energy is delivered (IEC 61724-1); per-inverter figures at the "
                    f"inverters; design AC loss between them {self.ac_loss_pct:g} %")
        if self.has_meter:
            return ("plant yields and PR at the inverters (sum of their outputs), as the site "
                    "file's meter basis asks; the meter is reconciled against them")
        return ("plant yields and PR at the inverters (sum of their outputs): the site file "
                "maps no export meter (an energy register or interval-energy column of the "
                "plant)")


def meter_columns(site: Site) -> list[tuple[str, Any]]:
    """The logger columns of the plant's meter: (logger name, column)."""
    return [(lg.name, c) for lg in site.loggers for c in lg.columns
            if c.device == "plant" and c.quantity in METER_QUANTITIES]


def load_settings(site: Site) -> MeterSettings:
    """Validate the optional ``[meter]`` table of the site file into :class:`MeterSettings`."""
    t = Table(site.raw.get("meter", {}), "meter", site.path)
    ac_loss = t.number("ac_loss_pct", None, lo=0, hi=20)
    basis = t.get("basis", str, "auto", BASES)
    t.done()
    cols = meter_columns(site)
    channels = tuple(f"column {c.name} of logger {lg}" for lg, c in cols)
    if not cols:
        if basis == "meter":
            raise t._err("basis", "\"meter\" needs a meter column: a [[loggers.columns]] with "
                         "inverter = \"plant\" and quantity energy_register or energy_interval")
        if ac_loss is not None:
            raise t._err("ac_loss_pct", "the site file maps no meter to apply it to (a "
                         "[[loggers.columns]] with inverter = \"plant\" and quantity "
                         "energy_register or energy_interval)")
    resolved = "meter" if cols and basis != "inverters" else "inverters"
    return MeterSettings(ac_loss_pct=ac_loss or 0.0, basis=resolved, channels=channels)


# --------------------------------------------------------------------------------------------
# the meter's energy


def spans(raw: pd.DataFrame, interval_s: float, rollover_wh: float | None,
          daily_reset_tz: str | None, pac0: float) -> pd.DataFrame:
    """The meter's energy as spans of time: columns ``energy_wh``, ``lo``, ``hi`` (UTC, the
    energy counted over [lo, hi)) and ``gap`` (the span is longer than 1.5 of the meter's
    intervals: its records have a gap there).

    ``raw`` holds the meter's readings per stored instant (``ts``, ``register_wh``,
    ``energy_interval_wh``; see ``sql/meter_readings.sql``); ``interval_s`` is the meter's
    logging interval [s]. Interval energy, where the meter logs it, covers [ts, ts +
    interval); else a register reading stored at an interval's start is the count when that
    interval closed (as :func:`perfcheck.align.register_power` reads it), so the step between
    two readings covers [ts_prev + interval, ts + interval). Steps are
    :func:`perfcheck.align.register_steps`; a span above 1.5 times the plant's AC rating
    ``pac0`` [W] over its time is dropped (a reset or a replaced meter).
    """
    iv = pd.Timedelta(seconds=interval_s)
    ts = pd.to_datetime(raw["ts"], utc=True)
    if raw["energy_interval_wh"].notna().any():
        keep = raw["energy_interval_wh"].notna().to_numpy()
        out = pd.DataFrame({"energy_wh": raw["energy_interval_wh"].to_numpy()[keep],
                            "lo": ts[keep].array, "hi": (ts[keep] + iv).array})
    else:
        reg = raw[raw["register_wh"].notna()]
        rts = pd.to_datetime(reg["ts"], utc=True).reset_index(drop=True)
        step = align.register_steps(reg["register_wh"].reset_index(drop=True), rts,
                                    rollover_wh, daily_reset_tz)
        out = pd.DataFrame({"energy_wh": step.to_numpy(), "lo": (rts.shift() + iv).array,
                            "hi": (rts + iv).array})  # instants kept as such, not as objects
    seconds = (out["hi"] - out["lo"]).dt.total_seconds()
    ok = out["energy_wh"].notna() & (seconds > 0) \
        & (out["energy_wh"] <= MAX_RATING_MULTIPLE * pac0 * seconds / 3600.0)
    out = out[ok].reset_index(drop=True)
    out["gap"] = seconds[ok].to_numpy() > GAP_INTERVALS * interval_s
    return out


@dataclass(frozen=True)
class Placed:
    """The meter's energy on the ledger's intervals."""

    energy_wh: np.ndarray  # per interval (rows), or per interval and inverter; NaN: none
    shaped: np.ndarray  # per interval: from a span over several intervals, in the expected shape
    unplaced_wh: float  # energy of spans that cover no ledger interval


def place(sp: pd.DataFrame, index: pd.DatetimeIndex, interval_s: np.ndarray,
          shape_w: np.ndarray) -> Placed:
    """The meter's energy per ledger interval [Wh], which intervals took it in the expected
    shape, and the energy of spans that cover no ledger interval.

    A span no longer than the interval it starts in goes to that interval whole; a longer
    span (a gap, a meter read less often than the inverters) is shared over the intervals
    that start inside it in proportion to ``shape_w`` (the plant's expected power [W]), or to
    their length where the expected power is zero throughout (at night).
    """
    n = len(index)
    out = np.full(n, np.nan)
    hit = np.zeros(n, dtype=bool)
    shaped = np.zeros(n, dtype=bool)
    if sp.empty or n == 0:
        return Placed(out, shaped, float(sp["energy_wh"].sum()) if not sp.empty else 0.0)
    starts = index.as_unit("ns").asi8
    ends = starts + (interval_s * 1e9).astype(np.int64)
    lo = pd.DatetimeIndex(sp["lo"]).as_unit("ns").asi8
    hi = pd.DatetimeIndex(sp["hi"]).as_unit("ns").asi8
    e = sp["energy_wh"].to_numpy(dtype=float)
    row = np.searchsorted(starts, lo, side="right") - 1
    inside = row >= 0
    inside[inside] = lo[inside] < ends[row[inside]]
    short = inside & (hi <= ends[np.clip(row, 0, n - 1)])
    total = np.zeros(n)
    np.add.at(total, row[short], e[short])
    hit[row[short]] = True
    long_ = np.flatnonzero(~short)
    unplaced = 0.0
    if len(long_):
        k = np.searchsorted(lo[long_], starts, side="right") - 1
        mine = (k >= 0) & (starts < hi[long_][np.clip(k, 0, None)])
        k = np.where(mine, k, -1)
        w = np.where(mine, np.nan_to_num(np.clip(shape_w, 0, None)) * interval_s, 0.0)
        wsum = np.bincount(k[mine], w[mine], minlength=len(long_))
        flat = np.where(mine & (wsum[np.clip(k, 0, None)] <= 0), interval_s, 0.0)
        w = np.where(wsum[np.clip(k, 0, None)] > 0, w, flat)
        wsum = np.bincount(k[mine], w[mine], minlength=len(long_))
        rows = np.flatnonzero(mine)
        share = w[rows] / wsum[k[rows]]
        np.add.at(total, rows, e[long_][k[rows]] * share)
        hit[rows] = shaped[rows] = True
        unplaced = float(e[long_][wsum <= 0].sum())
    out[hit] = total[hit]
    return Placed(out, shaped, unplaced)


def share(meter_wh: np.ndarray, measured_wh: np.ndarray, expected_wh: np.ndarray
          ) -> np.ndarray:
    """Each interval's meter energy shared over the inverters (columns) [Wh]: by their
    measured energy, an inverter without a measurement by its expected energy; evenly where
    all weights are zero. NaN where the meter has no energy for the interval."""
    w = np.where(np.isfinite(measured_wh), measured_wh, np.nan_to_num(expected_wh))
    w = np.clip(w, 0, None)
    total = w.sum(axis=1, keepdims=True)
    even = np.full_like(w, 1.0 / max(w.shape[1], 1))
    frac = np.where(total > 0, w / np.where(total > 0, total, 1.0), even)
    return meter_wh[:, None] * frac


def delivered(con: duckdb.DuckDBPyConnection, site: Site, index: pd.DatetimeIndex,
              interval_s: np.ndarray, measured_w: np.ndarray, expected_w: np.ndarray
              ) -> Placed | None:
    """The meter's energy on the ledger's (interval x inverter) grid [Wh] (:func:`place`,
    then :func:`share`); None without a meter."""
    cols = meter_columns(site)
    if not cols:
        return None
    raw = con.execute(db.sql("meter_readings")).df()
    if raw.empty:
        return Placed(np.full(measured_w.shape, np.nan), np.zeros(len(index), dtype=bool), 0.0)
    intervals = ingest.channel_intervals(con)
    quantity = "energy_interval" if raw["energy_interval_wh"].notna().any() \
        else "energy_register"
    col = next((c for _, c in cols if c.quantity == quantity), cols[0][1])
    iv = float(intervals.get((col.stored, "plant"), np.median(interval_s)))
    sp = spans(raw, iv, col.rollover_wh, site.timezone if col.resets_daily else None,
               site.ac_kw * 1000.0)
    hours = interval_s / 3600.0
    at = place(sp, index, interval_s, np.nansum(expected_w, axis=1))
    return Placed(share(at.energy_wh, measured_w * hours[:, None], expected_w * hours[:, None]),
                  at.shaped, at.unplaced_wh)
