"""The suite's invented plants: designs, loggers, truth physics and faults, drawn from a seed.

Plant ``i`` of a suite is drawn from ``SeedSequence([seed, i])`` alone, so a sample of the
suite is the same plants as the full suite. Every fifth plant (i = 2, 7, 12, ...) is
fault-free; the others take three fault kinds from a shuffled deck of :data:`FAULT_KINDS`, so
every kind appears about equally often; time and size of each fault are drawn at random.
Plants with degradation run two calendar years, the others one.

Plants from index :data:`TRACKER_FROM` on sit on horizontal single-axis trackers (half of them
bifacial), added after the fixed plants so that those keep their draw. They stow in high wind
(a design limit that their site file states or leaves to be inferred) and take a stalled
tracker and two more kinds from :data:`TRACKER_FAULTS`; every fifth is fault-free as above.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perfcheck.scenario.faults import (
    ClockShift,
    Curtailment,
    Outage,
    SensorFault,
    Soiling,
    StringLoss,
    Tree,
)
from perfcheck.scenario.suite.climate import CLIMATES

FAULT_KINDS = ("outage", "partial_outage", "clipping", "curtailment", "soiling", "shading",
               "degradation", "sensor_fault", "clock_fault")
TRACKER_FROM = 22  # plants from this index on are tracker plants (issue 14)
TRACKER_FAULTS = ("tracker_out_of_step", "outage", "partial_outage", "curtailment", "soiling",
                  "clipping")
FAULTS_PER_PLANT = 3
FAULT_FREE_EVERY = 5  # plant i is fault-free when i % 5 == 2
LEAD_DAYS = 45  # no fault in the first days: the detectors' reference window (common practice)
# SAPM spectral coefficients A0..A4 of two module technologies, from the Sandia module
# database that pvlib ships (sam-library-sandia-modules-2015-6-30.csv).
SPECTRAL_MODULES = ("Canadian_Solar_CS5P_220M___2009_", "First_Solar_FS_272___2009_")
# the cell technology each one's datasheet states, as the site file names it
MODULE_TECHNOLOGY = {"Canadian_Solar_CS5P_220M___2009_": "mono_si",
                     "First_Solar_FS_272___2009_": "cdte"}


@dataclass(frozen=True)
class ArraySpec:
    dc_kwp: float
    tilt_deg: float
    azimuth_deg: float
    strings: int
    gamma_pct_per_c: float


@dataclass(frozen=True)
class InverterSpec:
    id: str
    ac_kw: float
    arrays: tuple[ArraySpec, ...]


@dataclass(frozen=True)
class TruthPhysics:
    """How the plant's physics differ from the model's."""

    iam: str  # "ashrae" | "martin_ruiz"
    iam_parameter: float  # b0 or a_r
    spectral_module: str
    adr_k_d: float
    adr_k_rs: float
    adr_k_rsh: float
    thermal_tau_s: float
    mismatch_pct: dict  # inverter id -> true mismatch loss [%] (the site file says 1 %)


@dataclass(frozen=True)
class Derate:
    """An inverter limited below its rating (a clipping fault)."""

    inverter: str
    start: str
    end: str
    limit_kw: float


@dataclass(frozen=True)
class TrackerSpec:
    """Horizontal single-axis trackers (north-south axis) of a tracker plant, and their truth."""

    max_angle_deg: float
    gcr: float
    backtrack: bool
    bifaciality: float | None  # None: monofacial
    row_height_m: float
    row_pitch_m: float
    stow_quantile: float  # the stow limit is this quantile of the daylight wind speed
    stow_stated: bool  # the site file states the limit (else the detector infers it)
    rear_shade: float  # truth: share of the rear irradiance the structure blocks
    angle_channel: bool  # the logger records the first inverter's tracker angle


@dataclass(frozen=True)
class TrackerFault:
    """Rows of one inverter stalled at an angle, or turning by a constant offset."""

    inverter: str
    start: str
    end: str
    mode: str  # "stall" | "step"
    angle_deg: float  # the stall angle, or the offset


@dataclass(frozen=True)
class PlantSpec:
    index: int
    name: str
    climate: str
    design: str  # "fixed" | "east_west"
    start: dt.date
    days: int
    interval_min: int
    inverters: tuple[InverterSpec, ...]
    has_poa: bool
    has_ghi: bool
    csv_style: str  # "comma" (',' and '.') | "semicolon" (';' and ',')
    physics: TruthPhysics
    kinds: tuple[str, ...]
    degradation_pct_per_year: float = 0.0
    soiling: tuple[Soiling, ...] = ()
    tree: Tree | None = None
    string_loss: StringLoss | None = None
    outage: Outage | None = None
    curtailment: tuple[Curtailment, ...] = ()
    derate: Derate | None = None
    sensor: SensorFault | None = None
    clock: ClockShift | None = None
    clock_mode: str = ""  # "offset" | "missed_dst"
    tracker: TrackerSpec | None = None
    tracker_faults: tuple[TrackerFault, ...] = ()
    notes: dict = field(default_factory=dict)


def fault_kinds(index: int, seed: int) -> tuple[str, ...]:
    """The fault kinds of plant ``index``: a shuffled deck dealt three at a time (a tracker
    plant: a stall and two kinds of :data:`TRACKER_FAULTS`)."""
    if index % FAULT_FREE_EVERY == 2:
        return ()
    if index >= TRACKER_FROM:
        pick = np.random.default_rng([seed, 998, index]).choice(TRACKER_FAULTS, 2, replace=False)
        return ("tracker_stall", *(str(k) for k in pick))
    faulty_before = index - (index + FAULT_FREE_EVERY - 2) // FAULT_FREE_EVERY
    deck_no, pos = divmod(faulty_before * FAULTS_PER_PLANT, len(FAULT_KINDS))
    decks = [np.random.default_rng([seed, 999, k]).permutation(FAULT_KINDS)
             for k in (deck_no, deck_no + 1)]
    cards = [str(x) for x in np.concatenate(decks)[pos:]]
    out: list[str] = []
    for k in cards:  # three distinct kinds (a repeat at a deck boundary is skipped)
        if k not in out:
            out.append(k)
        if len(out) == FAULTS_PER_PLANT:
            break
    return tuple(out)


def _inverters(rng: np.random.Generator, design: str) -> tuple[InverterSpec, ...]:
    n = int(rng.integers(1, 4))
    gamma = float(rng.choice([-0.29, -0.35, -0.40]))
    out = []
    for k in range(n):
        ac_kw = float(rng.choice([20.0, 25.0, 30.0, 40.0]))
        ratio = float(rng.uniform(1.05, 1.35))
        strings = int(rng.integers(3, 8))
        if design == "tracker":  # the plane of a north-south axis, flat
            arrays = (ArraySpec(round(ac_kw * ratio, 1), 0.0, 180.0, strings, gamma),)
        elif design == "fixed":
            arrays = (ArraySpec(round(ac_kw * ratio, 1), float(rng.integers(15, 36)),
                                float(rng.integers(160, 201)), strings, gamma),)
        else:  # east-west: each inverter half east, half west
            tilt, az = float(rng.integers(8, 16)), float(rng.integers(85, 106))
            half = round(ac_kw * ratio / 2, 1)
            arrays = (ArraySpec(half, tilt, az, strings, gamma),
                      ArraySpec(half, tilt, az + 180.0, strings, gamma))
        out.append(InverterSpec(f"wr{k + 1}", ac_kw, arrays))
    return tuple(out)


def _truth_physics(rng: np.random.Generator, ids: list[str]) -> TruthPhysics:
    physics = TruthPhysics(
        iam=str(rng.choice(["ashrae", "martin_ruiz"])),
        iam_parameter=0.0, spectral_module=str(rng.choice(SPECTRAL_MODULES)),
        adr_k_d=float(rng.uniform(-6.5, -5.2)), adr_k_rs=float(rng.uniform(0.02, 0.08)),
        adr_k_rsh=float(rng.uniform(0.05, 0.2)), thermal_tau_s=float(rng.uniform(300, 600)),
        mismatch_pct={i: round(float(rng.uniform(0.5, 3.0)), 2) for i in ids})
    return TruthPhysics(**{**physics.__dict__, "iam_parameter": round(float(
        rng.uniform(0.04, 0.07) if physics.iam == "ashrae" else rng.uniform(0.14, 0.20)), 3)})


def _day(start: dt.date, days: int, rng: np.random.Generator, length: int) -> dt.date:
    """A random first day of a window of ``length`` days after the lead time."""
    return start + dt.timedelta(days=int(rng.integers(LEAD_DAYS, days - length - 2)))


def _t(day: dt.date, hour: float) -> str:
    h, m = divmod(int(round(hour * 60)), 60)
    return f"{day.isoformat()} {h:02d}:{m:02d}"


def dst_changes(tz: str, start: dt.date, days: int) -> list[dt.date]:
    """Local dates on which the zone's UTC offset changes inside the period."""
    idx = pd.date_range(pd.Timestamp(start), periods=days + 1, freq="D", tz=tz)
    offsets = np.array([t.utcoffset().total_seconds() for t in idx])
    return [idx[i].date() for i in np.flatnonzero(np.diff(offsets) != 0)]


def draw_plant(index: int, seed: int) -> PlantSpec:
    """Plant ``index`` of the suite with this seed."""
    if index >= TRACKER_FROM:
        return _draw_tracker_plant(index, seed)
    rng = np.random.default_rng([seed, index])
    kinds = fault_kinds(index, seed)
    clim = CLIMATES[index % len(CLIMATES)]
    design = "east_west" if rng.random() < 0.35 else "fixed"
    degraded = "degradation" in kinds
    interval = 15 if degraded else int(rng.choice([5, 10, 15]))
    start = dt.date(2023, int(rng.integers(1, 13)), 1)
    days = (start.replace(year=start.year + (2 if degraded else 1)) - start).days
    invs = _inverters(rng, design)
    ids = [inv.id for inv in invs]
    physics = _truth_physics(rng, ids)
    has_poa = "sensor_fault" in kinds or rng.random() < 0.7
    spec = dict(
        index=index, name=f"Suite plant {index:02d} ({clim.key})", climate=clim.key,
        design=design, start=start, days=days, interval_min=interval, inverters=invs,
        has_poa=has_poa, has_ghi=not has_poa or rng.random() < 0.5,
        csv_style=str(rng.choice(["comma", "semicolon"])), physics=physics, kinds=kinds)
    _draw_faults(spec, rng, kinds, invs, start, days, clim.timezone)
    return PlantSpec(**spec)


def _draw_faults(spec: dict, rng: np.random.Generator, kinds: tuple[str, ...],
                 invs: tuple[InverterSpec, ...], start: dt.date, days: int, tz: str) -> None:
    """Each fault kind's time and size, drawn in the order of ``kinds`` into ``spec``."""
    ids = [inv.id for inv in invs]
    target = str(rng.choice(ids))
    ac_total = sum(inv.ac_kw for inv in invs)
    for kind in kinds:
        if kind == "degradation":
            spec["degradation_pct_per_year"] = round(float(rng.uniform(0.3, 1.5)), 2)
        elif kind == "soiling":
            length = int(rng.integers(30, 121))
            d = _day(start, days, rng, length)
            spec["soiling"] = (Soiling(_t(d, 6), _t(d + dt.timedelta(days=length), 10),
                                       round(float(rng.uniform(0.1, 0.5)), 2)),)
        elif kind == "shading":
            # a tree across 70 deg of the morning or afternoon sun, 3 deg high after the lead
            # time, 15-30 deg high at the end: its loss first exceeds 1 % on a later day
            az = float(rng.choice([90.0, 200.0])) + float(rng.integers(0, 21))
            growth = float(rng.uniform(12.0, 27.0)) / ((days - LEAD_DAYS) / 365.25)
            spec["tree"] = Tree(target, az, az + 70.0,
                                (start + dt.timedelta(days=LEAD_DAYS)).isoformat(), 3.0,
                                round(growth, 1), round(float(rng.uniform(0.1, 0.3)), 2))
        elif kind == "partial_outage":
            length = int(rng.integers(3, 31))
            d = _day(start, days, rng, length)
            inv = next(i for i in invs if i.id == target)
            total = sum(a.strings for a in inv.arrays)
            spec["string_loss"] = StringLoss(
                target, _t(d, float(rng.uniform(8, 14))),
                _t(d + dt.timedelta(days=length), float(rng.uniform(8, 14))),
                int(rng.integers(1, max(2, total // 3 + 1))))
        elif kind == "outage":
            length = int(rng.integers(1, 6))
            d = _day(start, days, rng, length)
            spec["outage"] = Outage(target, _t(d, float(rng.uniform(7, 12))),
                                    _t(d + dt.timedelta(days=length), float(rng.uniform(12, 17))))
        elif kind == "curtailment":
            n_days = int(rng.integers(2, 7))
            d = _day(start, days, rng, 60)
            picks = sorted(rng.choice(60, n_days, replace=False))
            share = float(rng.uniform(0.4, 0.8))
            spec["curtailment"] = tuple(
                Curtailment(_t(d + dt.timedelta(days=int(p)), 9.5),
                            _t(d + dt.timedelta(days=int(p)), 16.0),
                            round(ac_total * share, 1)) for p in picks)
        elif kind == "clipping":
            length = int(rng.integers(5, 41))
            d = _day(start, days, rng, length)
            inv = next(i for i in invs if i.id == target)
            spec["derate"] = Derate(target, _t(d, 0), _t(d + dt.timedelta(days=length), 0),
                                    round(inv.ac_kw * float(rng.uniform(0.5, 0.85)), 1))
        elif kind == "sensor_fault":
            mode = str(rng.choice(["step", "drift", "stuck"]))
            length = {"step": int(rng.integers(10, 61)), "drift": int(rng.integers(60, 181)),
                      "stuck": int(rng.integers(1, 4))}[mode]
            d = _day(start, days, rng, length)
            sign = float(rng.choice([-1.0, 1.0]))
            hour = float(rng.uniform(9, 14)) if mode == "stuck" else 0.0  # stuck in daylight
            spec["sensor"] = SensorFault(
                _t(d, hour), _t(d + dt.timedelta(days=length), hour), mode,
                1.0 if mode == "stuck" else round(1 + sign * float(rng.uniform(0.03, 0.06)), 3))
        elif kind == "clock_fault":
            changes = dst_changes(tz, start + dt.timedelta(days=LEAD_DAYS),
                                  days - LEAD_DAYS - 25)
            if changes and rng.random() < 0.5:
                d = changes[int(rng.integers(0, len(changes)))]
                # the logger keeps the old offset: in spring its labels are an hour early
                # against the new local time, in autumn an hour late
                spring = pd.Timestamp(d).month < 7
                spec["clock"] = ClockShift(_t(d, 4), _t(d + dt.timedelta(
                    days=int(rng.integers(10, 21))), 4), -60 if spring else 60)
                spec["clock_mode"] = "missed_dst"
            else:
                length = int(rng.integers(5, 31))
                d = _day(start, days, rng, length)
                spec["clock"] = ClockShift(_t(d, 3), _t(d + dt.timedelta(days=length), 3),
                                           int(rng.choice([-1, 1]) * rng.integers(30, 121)))
                spec["clock_mode"] = "offset"
        elif kind in ("tracker_stall", "tracker_out_of_step"):
            stall = kind == "tracker_stall"
            length = int(rng.integers(2, 21) if stall else rng.integers(5, 31))
            d = _day(start, days, rng, length)
            lim = spec["tracker"].max_angle_deg
            angle = (float(rng.integers(-lim, lim + 1)) if stall
                     else float(rng.choice([-1, 1]) * rng.integers(15, 36)))
            who = target if stall else str(rng.choice([i for i in ids if i != target] or ids))
            spec["tracker_faults"] = (*spec.get("tracker_faults", ()), TrackerFault(
                who, _t(d, float(rng.uniform(7, 17))),
                _t(d + dt.timedelta(days=length), float(rng.uniform(7, 17))),
                "stall" if stall else "step", angle))


def _draw_tracker_plant(index: int, seed: int) -> PlantSpec:
    """A tracker plant: 1-3 inverters on horizontal single-axis trackers, GHI station with
    wind, 10- or 15-minute loggers, one calendar year."""
    rng = np.random.default_rng([seed, index])
    kinds = fault_kinds(index, seed)
    clim = CLIMATES[index % len(CLIMATES)]
    start = dt.date(2023, int(rng.integers(1, 13)), 1)
    days = (start.replace(year=start.year + 1) - start).days
    invs = _inverters(rng, "tracker")
    ids = [inv.id for inv in invs]
    bifacial = rng.random() < 0.5
    gcr = round(float(rng.uniform(0.3, 0.45)), 2)
    tracker = TrackerSpec(
        max_angle_deg=float(rng.choice([50.0, 55.0, 60.0])), gcr=gcr,
        backtrack=bool(rng.random() < 0.8),
        bifaciality=round(float(rng.uniform(0.65, 0.8)), 2) if bifacial else None,
        row_height_m=round(float(rng.uniform(1.3, 2.2)), 2),
        row_pitch_m=round(2.0 / gcr, 2), stow_quantile=float(rng.uniform(0.99, 0.998)),
        stow_stated=bool(rng.random() < 0.6), rear_shade=float(rng.uniform(0.02, 0.08)),
        angle_channel=bool(rng.random() < 0.5))
    physics = _truth_physics(rng, ids)
    spec = dict(
        index=index, name=f"Suite plant {index:02d} ({clim.key}, trackers)",
        climate=clim.key, design="tracker_bifacial" if bifacial else "tracker", start=start,
        days=days, interval_min=int(rng.choice([10, 15])), inverters=invs,
        has_poa=False, has_ghi=True, csv_style=str(rng.choice(["comma", "semicolon"])),
        physics=physics, kinds=kinds, tracker=tracker)
    _draw_faults(spec, rng, kinds, invs, start, days, clim.timezone)
    return PlantSpec(**spec)
