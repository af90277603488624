"""The fault schedule of the demo scenario and the time helpers it is written with.

Every window is given in the site's local wall time (``YYYY-MM-DD HH:MM``), end exclusive.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

# The order in which faults are switched on (and their energy attributed): each fault's energy
# is the AC energy before it minus the AC energy after it, so nothing is counted twice.
ATTRIBUTION_ORDER = (
    "degradation",
    "soiling",
    "shading",
    "tracker_stall",
    "partial_outage",
    "outage",
    "curtailment",
)


@dataclass(frozen=True)
class Soiling:
    """A dusty episode: loss grows linearly, rain washes it off, a cleaning ends it."""

    start: str
    cleaning: str
    rate_pct_per_day: float


@dataclass(frozen=True)
class Tree:
    """A tree in an azimuth sector whose crown top rises linearly with time."""

    inverter: str
    azimuth_from_deg: float
    azimuth_to_deg: float
    reference: str  # local date at which the crown top is ``top_deg``
    top_deg: float
    growth_deg_per_year: float
    transmittance: float  # share of the beam that passes the crown


@dataclass(frozen=True)
class TrackerStall:
    """A tracker drive that stops: the rows stay at the rotation they had when it stopped
    (they cannot stow either) until the drive is repaired and they track again."""

    inverter: str
    start: str
    end: str


@dataclass(frozen=True)
class StringLoss:
    inverter: str
    start: str
    end: str
    strings_lost: int


@dataclass(frozen=True)
class Outage:
    inverter: str
    start: str
    end: str


@dataclass(frozen=True)
class Curtailment:
    start: str
    end: str
    setpoint_kw: float  # plant export setpoint, shared pro rata over the inverters


@dataclass(frozen=True)
class SensorFault:
    start: str
    end: str
    # "reads_low" or "step" (times ``factor``), "drift" (linear from 1 to ``factor`` over the
    # window) or "stuck" (repeats its first value)
    mode: str
    factor: float = 1.0


@dataclass(frozen=True)
class ClockShift:
    start: str
    end: str
    minutes: int  # the main logger's labels are late by this much


@dataclass(frozen=True)
class Gap:
    logger: str
    start: str
    end: str


@dataclass(frozen=True)
class Faults:
    """When and how the faults strike in the demo."""

    degradation_pct_per_year: float = 0.6
    soiling: tuple[Soiling, ...] = (Soiling("2025-07-01 06:00", "2025-08-19 10:00", 0.30),)
    soiling_rain_mm: float = 5.0  # rain within 24 h that washes the modules
    tree: Tree | None = Tree("inv3", 205.0, 245.0, "2024-05-01", 3.0, 8.0, 0.25)
    tracker_stall: TrackerStall | None = TrackerStall("inv4", "2025-06-16 09:40",
                                                      "2025-06-24 14:15")
    string_loss: StringLoss | None = StringLoss("inv1", "2025-09-02 11:10", "2025-09-23 14:30", 2)
    outage: Outage | None = Outage("inv2", "2025-04-18 10:35", "2025-04-19 16:20")
    curtailment: tuple[Curtailment, ...] = (
        Curtailment("2025-05-14 09:00", "2025-05-14 17:00", 70.0),
        Curtailment("2025-05-15 09:00", "2025-05-15 17:00", 70.0),
        Curtailment("2025-05-26 10:00", "2025-05-26 15:00", 70.0),
        Curtailment("2025-06-07 10:00", "2025-06-07 16:00", 60.0),
        Curtailment("2025-06-08 10:00", "2025-06-08 16:00", 60.0),
        Curtailment("2026-04-11 09:30", "2026-04-11 16:30", 80.0),
    )
    poa_sensor: tuple[SensorFault, ...] = (
        SensorFault("2025-10-06 00:00", "2025-11-03 00:00", "reads_low", 0.91),
        SensorFault("2026-02-10 09:00", "2026-02-12 15:00", "stuck"),
    )
    clock: ClockShift | None = ClockShift("2025-01-13 01:00", "2025-02-10 01:00", 60)
    gaps: tuple[Gap, ...] = (
        Gap("fl3", "2024-11-19 00:00", "2024-11-21 00:00"),
        Gap("fl3", "2025-08-05 12:00", "2025-08-05 15:30"),
        Gap("ws2", "2025-03-03 09:00", "2025-03-03 13:40"),
        Gap("ws2", "2025-12-05 00:00", "2025-12-06 00:00"),
    )
    corrupt_rows_per_year: float = 7.0  # damaged lines in the main logger's files
    meter_reset: str | None = "2025-11-14 10:20"  # plant meter replaced: register restarts at 0
    reexport: tuple[str, str] | None = ("2025-03-10", "2025-03-17")  # days exported twice


# The fault-free plant (same weather, same sensor noise, clean logger files).
NO_FAULTS = replace(
    Faults(), degradation_pct_per_year=0.0, soiling=(), tree=None, tracker_stall=None,
    string_loss=None, outage=None, curtailment=(), poa_sensor=(), clock=None, gaps=(),
    corrupt_rows_per_year=0.0, meter_reset=None, reexport=None,
)


def local_ts(text: str, tz: Any) -> pd.Timestamp:
    """A local wall-time string of the site as a UTC timestamp."""
    return pd.Timestamp(text).tz_localize(tz).tz_convert("UTC")


def window(times: pd.DatetimeIndex, start: str, end: str, tz: Any) -> np.ndarray:
    """Boolean mask of the interval starts in [start, end) (local wall times)."""
    return np.asarray((times >= local_ts(start, tz)) & (times < local_ts(end, tz)))


def iso(ts: pd.Timestamp, tz: Any) -> str:
    """ISO 8601 in the site's local time with its UTC offset."""
    return ts.tz_convert(tz).isoformat()


def entry(kind: str, scope: str, start: str, end: str, tz: Any, params: dict,
          energy_kwh: float = 0.0) -> dict:
    """One truth entry for a fault given by local wall times."""
    return {"kind": kind, "scope": scope, "start": iso(local_ts(start, tz), tz),
            "end": iso(local_ts(end, tz), tz), "energy_loss_kwh": round(energy_kwh, 3),
            "parameters": params}
