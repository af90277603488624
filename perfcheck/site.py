"""The site file: one TOML document describing the plant, its design and its logger files.

It is read with the standard library's ``tomllib`` and validated into small frozen dataclasses.
Every error names the key path (``inverters[1].arrays[0].tilt_deg``) and what was expected.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import fnmatch
import math
import os
import re
import tomllib
import zoneinfo
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from perfcheck.errors import SiteFileError

# Quantities a logger column can carry, with the units accepted for each. The stored name
# (with its SI unit suffix) is what the database and JSON use.
QUANTITIES: dict[str, tuple[str, tuple[str, ...]]] = {
    # quantity: (stored name, accepted units)
    "ac_power": ("ac_power_w", ("W", "kW", "MW")),
    "dc_power": ("dc_power_w", ("W", "kW", "MW")),
    "energy_register": ("energy_register_wh", ("Wh", "kWh", "MWh")),
    "energy_interval": ("energy_interval_wh", ("Wh", "kWh", "MWh")),
    "poa": ("poa_wm2", ("W/m2",)),
    "poa_rear": ("poa_rear_wm2", ("W/m2",)),  # rear of a bifacial module, POA sensor's plane
    "ghi": ("ghi_wm2", ("W/m2",)),
    "dhi": ("dhi_wm2", ("W/m2",)),
    "dni": ("dni_wm2", ("W/m2",)),
    "temp_air": ("temp_air_c", ("C", "K")),
    "temp_module": ("temp_module_c", ("C", "K")),
    "wind_speed": ("wind_speed_ms", ("m/s", "km/h")),
    "rain": ("rain_mm", ("mm",)),
    "tracker_angle": ("tracker_angle_deg", ("deg",)),  # rotation from flat, west positive
    # the logger's own status codes (text or integers), stored as they are written; the
    # column's ``states`` table says what each means, in STATES' words
    "status": ("status_code", ("code",)),
}
# Quantities that belong to an inverter (or to the plant meter); the others are site weather.
DEVICE_QUANTITIES = ("ac_power", "dc_power", "energy_register", "energy_interval")
# The states an inverter (or the plant) may report, in our words; a status column's ``states``
# table maps each of the logger's codes to one of them.
STATES = ("running", "stopped by the grid", "stopped by a fault", "derated", "maintenance",
          "standby", "starting up", "communication lost")

MOUNTINGS = ("open_rack", "close_roof", "insulated_back")
CONSTRUCTIONS = ("glass_glass", "glass_polymer")
# cell technologies the model has a spectral correction for (perfcheck.physics)
CELL_TECHNOLOGIES = ("mono_si", "multi_si", "cdte", "cigs", "a_si")
# precipitable water of the reference spectrum, ASTM G173-03 [cm]: the spectral term's default
REFERENCE_PRECIPITABLE_WATER_CM = 1.42
DECOMPOSITIONS = ("disc", "erbs", "boland")
TRANSPOSITIONS = ("perez", "haydavies", "isotropic")
TEMPERATURE_MODELS = ("sapm", "faiman")
IAM_MODELS = ("physical", "ashrae", "martin_ruiz", "none")
POA_SENSOR_KINDS = ("pyranometer", "reference_cell")
IRRADIANCE_SOURCES = ("auto", "poa_sensor", "ghi")
TRACKINGS = ("fixed", "single_axis")
TIME_KINDS = ("iso", "utc", "local", "epoch")
LABELS = ("start", "end")


@dataclass(frozen=True)
class Tracker:
    """A single-axis tracker: the rows turn about one axis to follow the sun."""

    axis_tilt_deg: float  # tilt of the axis from horizontal (0: horizontal single-axis)
    axis_azimuth_deg: float  # compass direction of the axis, clockwise from north
    max_angle_deg: float  # largest rotation either way from flat
    backtrack: bool  # turn back at low sun so the rows do not shade one another
    stow_wind_speed_ms: float | None = None  # the rows go to stow at this wind speed (None:
    # not stated; the detector infers it)
    stow_angle_deg: float = 0.0  # rotation of the rows in stow (0: flat)


@dataclass(frozen=True)
class Bifacial:
    """Modules that also take light on their rear, rows described for the infinite-sheds model."""

    bifaciality: float  # rear over front efficiency [-], e.g. 0.7
    row_height_m: float  # height of the row's centre above the ground
    row_pitch_m: float  # distance between rows


@dataclass(frozen=True)
class Array:
    """One orientation of modules feeding an inverter.

    A tracker array's ``tilt_deg`` and ``azimuth_deg`` are its plane with the tracker flat
    (the axis's tilt and azimuth); the modelled plane moves (``tracker``).
    """

    dc_kwp: float
    tilt_deg: float
    azimuth_deg: float  # clockwise from north
    gamma_pct_per_c: float  # temperature coefficient of Pmax [%/C], e.g. -0.37
    mounting: str
    construction: str
    strings: int
    albedo: float
    horizon: tuple[tuple[float, float], ...]  # (azimuth_deg, elevation_deg), sorted by azimuth
    gcr: float | None = None  # ground coverage ratio (trackers and bifacial rows)
    tracker: Tracker | None = None  # None: fixed
    bifacial: Bifacial | None = None  # None: monofacial
    technology: str | None = None  # cell technology (CELL_TECHNOLOGIES); None: no spectral term
    low_light_loss_pct: float = 0.0  # efficiency at 200 W/m^2 below its STC value [%]


@dataclass(frozen=True)
class Inverter:
    id: str
    ac_kw: float
    efficiency_pct: float  # nominal (CEC/EU-style weighted) efficiency [%]
    arrays: tuple[Array, ...]
    night_tare_w: float

    @property
    def dc_kwp(self) -> float:
        return sum(a.dc_kwp for a in self.arrays)


@dataclass(frozen=True)
class Losses:
    """Design losses in percent, combined multiplicatively (Dobos 2014)."""

    wiring_pct: float = 2.0
    mismatch_pct: float = 2.0
    nameplate_pct: float = 1.0
    lid_pct: float = 1.5
    other_pct: float = 0.0
    degradation_pct_per_year: float = 0.5

    @property
    def dc_factor(self) -> float:
        """Product of (1 - L_i/100) over the DC losses (age not included)."""
        f = 1.0
        for pct in (
            self.wiring_pct,
            self.mismatch_pct,
            self.nameplate_pct,
            self.lid_pct,
            self.other_pct,
        ):
            f *= 1.0 - pct / 100.0
        return f


@dataclass(frozen=True)
class Model:
    """Model choices for the expected series; defaults are documented in the README."""

    irradiance_source: str = "auto"
    poa_sensor_kind: str = "pyranometer"
    poa_sensor_tilt_deg: float | None = None  # default: plane of the first array
    poa_sensor_azimuth_deg: float | None = None
    poa_sensor_on_tracker: bool = False  # the sensor rides the first tracker array's tracker
    # (default in the site file: true when the first array is a tracker, see _sensor_on_tracker)
    decomposition: str = "disc"
    transposition: str = "perez"
    temperature_model: str = "sapm"
    iam: str = "physical"
    poa_uncertainty_pct: float | None = None  # default from the sensor class
    sensor_class: str = "A"
    sensor_stability_pct_per_year: float | None = None  # default from the sensor class
    precipitable_water_cm: float = REFERENCE_PRECIPITABLE_WATER_CM  # for the spectral term


@dataclass(frozen=True)
class Column:
    """One logger column: where it is, what it holds, in which unit."""

    name: str
    quantity: str
    unit: str
    device: str  # inverter id, "plant", or "site" for weather
    rollover_wh: float | None = None  # for energy registers that wrap
    resets_daily: bool = False  # an energy register that restarts from 0 at local midnight
    states: tuple[tuple[str, str], ...] = ()  # status codes: (code as written, state in STATES)
    # a tall logger's column read for one device: the device names (as the file writes them)
    # whose rows feed it; empty: every row (a wide logger)
    when_device: tuple[str, ...] = ()

    @property
    def stored(self) -> str:
        return QUANTITIES[self.quantity][0]


@dataclass(frozen=True)
class TimeSpec:
    columns: tuple[str, ...]  # one column, or date and time columns joined with a space
    kind: str  # iso (with offset), utc (naive UTC), local (naive site-local), epoch (seconds)
    format: str | None  # strptime format for utc/local; None: ISO 8601
    label: str  # the logger labels an interval by its "start" or its "end"


@dataclass(frozen=True)
class Logger:
    """How one kind of logger file is written."""

    name: str
    match: str  # filename glob that selects this logger for a file
    delimiter: str
    decimal: str
    preamble_lines: int
    units_row: bool
    interval_min: int
    time: TimeSpec
    sentinels: tuple[str, ...]
    columns: tuple[Column, ...]  # a tall logger's: one per mapped column and device it feeds
    device_column: str | None = None  # tall: one row per time and device, named here
    devices: tuple[tuple[str, str], ...] = ()  # tall: (device as written, id/plant/site)
    # historian-style tall: one row per time, device and point; columns[].name is the point
    point_column: str | None = None
    value_column: str | None = None
    # report-by-exception historian: a point's value holds, on the interval grid, until the
    # next value of that point, for at most this many minutes (None: values are not carried)
    carry_forward_min: int | None = None


@dataclass(frozen=True)
class Site:
    name: str
    latitude_deg: float
    longitude_deg: float
    altitude_m: float
    timezone: str
    commissioned: dt.date | None  # None: the age allowance starts from the data (age_reference)
    export_limit_kw: float | None
    inverters: tuple[Inverter, ...]
    losses: Losses
    model: Model
    loggers: tuple[Logger, ...]
    inbox: str | None
    path: Path
    raw: dict[str, Any] = field(repr=False, compare=False)
    module_age_years: float | None = None  # module age at the first data, without commissioned
    age_note: str | None = None  # how the age reference was chosen, when not commissioned

    @property
    def tz(self) -> zoneinfo.ZoneInfo:
        return zoneinfo.ZoneInfo(self.timezone)

    @property
    def dc_kwp(self) -> float:
        return sum(i.dc_kwp for i in self.inverters)

    @property
    def ac_kw(self) -> float:
        return sum(i.ac_kw for i in self.inverters)

    def inverter(self, inverter_id: str) -> Inverter:
        for inv in self.inverters:
            if inv.id == inverter_id:
                return inv
        raise KeyError(inverter_id)

    def aged(self, first_data: dt.date | None) -> Site:
        """This site with ``commissioned`` set to the reference of the age allowance and
        ``age_note`` saying how it was chosen, for a site file that gives no commissioning
        date: the first data's site-local day (``first_data``), moved back by
        ``module_age_years_at_first_data`` when stated. A site with ``commissioned``, or
        without data yet (``first_data`` None), is returned as it is."""
        if self.commissioned is not None or first_data is None:
            return self
        years = self.module_age_years or 0.0
        start = years_before(first_data, years)
        if years:
            note = (f"no commissioning date in the site file: the age allowance counts the "
                    f"modules as {years:g} years old at the first data ({first_data}), i.e. "
                    f"ageing from {start} (site.module_age_years_at_first_data)")
        else:
            note = (f"no commissioning date in the site file: the age allowance starts at the "
                    f"first data ({first_data}); if the modules are older, give "
                    "site.commissioned or site.module_age_years_at_first_data")
        return dataclasses.replace(self, commissioned=start, age_note=note)

    def age_record(self) -> dict[str, Any]:
        """The age reference and its note, as the check document's settings show them."""
        return {"age_reference_date": None if self.commissioned is None
                else self.commissioned.isoformat(),
                "notes": [self.age_note] if self.age_note else []}

    def logger_for(self, filename: str) -> Logger:
        """The logger whose ``match`` glob fits the file's name: of several, the most specific
        glob (:func:`glob_specificity`); two equally specific matches are an error."""
        name = Path(filename).name
        matches = [lg for lg in self.loggers if name_matches(name, lg.match)]
        if not matches:
            globs = ", ".join(repr(lg.match) for lg in self.loggers)
            raise SiteFileError(
                f"{filename}: no [[loggers]] entry matches this file name (match globs: {globs})"
            )
        best = max(glob_specificity(lg.match) for lg in matches)
        top = [lg for lg in matches if glob_specificity(lg.match) == best]
        if len(top) > 1:
            a, b = top[:2]
            raise SiteFileError(
                f"{filename}: [[loggers]] {a.name!r} (match {a.match!r}) and {b.name!r} (match "
                f"{b.match!r}) match this file name equally well; make one match more specific"
            )
        return top[0]


COMPRESSED = (".gz", ".zip")  # logger files read as they are, decompressed at ingest


def name_matches(name: str, pattern: str) -> bool:
    """A file name matches a ``[[loggers]]`` glob as it is, or, for a compressed file
    (``x.csv.gz``, ``x.csv.zip``), as the name without that suffix (``x.csv``)."""
    stem, suffix = os.path.splitext(name)
    return fnmatch.fnmatch(name, pattern) or (
        suffix.lower() in COMPRESSED and fnmatch.fnmatch(stem, pattern))


def years_before(day: dt.date, years: float) -> dt.date:
    """The day ``years`` (of 365.25 days, as the age allowance counts them) before ``day``."""
    return day - dt.timedelta(days=round(years * 365.25))


def glob_specificity(pattern: str) -> tuple[int, int]:
    """How specific a file-name glob is: (literal characters, one-character wildcards ``?`` and
    ``[...]``); a pattern with more literal characters is more specific, ``*`` the least."""
    body = re.sub(r"\[[^\]]*\]", "?", pattern)
    return sum(c not in "*?" for c in body), body.count("?")


# --------------------------------------------------------------------------------------------
# validation


class Table:
    """Reads one TOML table, remembering which keys were used, so unknown keys are refused."""

    def __init__(self, data: Any, path: str, file: Path):
        if not isinstance(data, dict):
            raise SiteFileError(f"{file}: {path}: expected a table, got {type(data).__name__}")
        self.data, self.path, self.file, self.used = data, path, file, set()

    def _key(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def _err(self, key: str, msg: str) -> SiteFileError:
        return SiteFileError(f"{self.file}: {self._key(key)}: {msg}")

    def get(self, key: str, kind: Any, default: Any = ..., choices: tuple | None = None) -> Any:
        self.used.add(key)
        if key not in self.data:
            if default is ...:
                raise self._err(key, f"missing key (expected {_kind_name(kind)})")
            return default
        value = self.data[key]
        if kind is float and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        if not isinstance(value, kind) or (isinstance(value, bool) and kind is not bool):
            got = type(value).__name__
            raise self._err(key, f"expected {_kind_name(kind)}, got {got} {value!r}")
        if isinstance(value, float) and not math.isfinite(value):
            raise self._err(key, f"expected a finite number, got {value!r}")
        if choices is not None and value not in choices:
            raise self._err(key, f"{value!r} is not one of {', '.join(map(repr, choices))}")
        return value

    def number(
        self, key: str, default: Any = ..., lo: float | None = None, hi: float | None = None
    ) -> Any:
        value = self.get(key, float, default)
        if value is None or value is default and default is not ...:
            return value
        if (lo is not None and value < lo) or (hi is not None and value > hi):
            raise self._err(key, f"{value} is outside the range {lo} to {hi}")
        return value

    def table(self, key: str, required: bool = False) -> Table:
        self.used.add(key)
        if key not in self.data:
            if required:
                raise self._err(key, "missing table")
            return Table({}, self._key(key), self.file)
        return Table(self.data[key], self._key(key), self.file)

    def tables(self, key: str, required: bool = True) -> list[Table]:
        self.used.add(key)
        items = self.data.get(key)
        if items is None:
            if required:
                raise self._err(key, "missing (expected one or more [[" + self._key(key) + "]])")
            return []
        if not isinstance(items, list) or not items:
            raise self._err(key, "expected a non-empty array of tables")
        return [Table(t, f"{self._key(key)}[{i}]", self.file) for i, t in enumerate(items)]

    def done(self) -> None:
        unknown = sorted(set(self.data) - self.used)
        if unknown:
            known = ", ".join(sorted(self.used))
            raise self._err(unknown[0], f"unknown key (known keys here: {known})")


def _kind_name(kind: Any) -> str:
    names = {float: "a number", int: "an integer", str: "a string", bool: "true or false",
             list: "an array", dt.date: "a date like 2024-03-01", dict: "a table"}
    if isinstance(kind, tuple):
        return " or ".join(names.get(k, k.__name__) for k in kind)
    return names.get(kind, kind.__name__)


def _horizon(t: Table, key: str, default: Any) -> tuple[tuple[float, float], ...]:
    raw = t.get(key, list, None)
    if raw is None:
        return default
    points = []
    for i, pair in enumerate(raw):
        ok = (
            isinstance(pair, list)
            and len(pair) == 2
            and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in pair)
        )
        if not ok:
            raise t._err(f"{key}[{i}]", "expected [azimuth_deg, elevation_deg]")
        az, el = float(pair[0]), float(pair[1])
        if not (0 <= az <= 360 and 0 <= el < 90):
            raise t._err(f"{key}[{i}]", "azimuth must be 0-360 and elevation 0-90 degrees")
        points.append((az, el))
    return tuple(sorted(points))


def _array(t: Table, albedo: float, horizon: tuple) -> Array:
    tracking = t.get("tracking", str, "fixed", TRACKINGS)
    tracker = _tracker(t) if tracking == "single_axis" else None
    bifaciality = t.number("bifaciality", None, lo=0, hi=1)
    needs_rows = tracker is not None or bifaciality is not None
    gcr = t.number("gcr", ... if needs_rows else None, lo=0.01, hi=0.99)
    if gcr is not None and not needs_rows:
        raise t._err("gcr", "only a tracker (tracking = \"single_axis\") or bifacial array "
                     "(bifaciality) uses it")
    if tracker is None:
        tilt, azimuth = t.number("tilt_deg", lo=0, hi=90), t.number("azimuth_deg", lo=0, hi=360)
    else:
        tilt, azimuth = tracker.axis_tilt_deg, tracker.axis_azimuth_deg
    a = Array(
        dc_kwp=t.number("dc_kwp", lo=0.001, hi=1e7),
        tilt_deg=tilt,
        azimuth_deg=azimuth,
        gamma_pct_per_c=t.number("gamma_pct_per_c", lo=-1.0, hi=0.0),
        mounting=t.get("mounting", str, "open_rack", MOUNTINGS),
        construction=t.get("construction", str, "glass_polymer", CONSTRUCTIONS),
        strings=t.get("strings", int),
        albedo=t.number("albedo", albedo, lo=0, hi=1),
        horizon=_horizon(t, "horizon", horizon),
        gcr=gcr,
        tracker=tracker,
        bifacial=None if bifaciality is None else _bifacial(t, bifaciality),
        technology=t.get("technology", str, None, CELL_TECHNOLOGIES),
        low_light_loss_pct=t.number("low_light_loss_pct", 0.0, lo=0, hi=50),
    )
    if a.strings < 1:
        raise t._err("strings", "expected at least 1")
    t.done()
    return a


def _tracker(t: Table) -> Tracker:
    """The keys of a single-axis tracker array; its plane comes from the axis, so the keys of
    a fixed plane are refused."""
    for key in ("tilt_deg", "azimuth_deg"):
        if key in t.data:
            raise t._err(key, "a single-axis tracker has no fixed plane; give axis_tilt_deg, "
                         "axis_azimuth_deg and max_angle_deg instead")
    return Tracker(
        axis_tilt_deg=t.number("axis_tilt_deg", 0.0, lo=0, hi=45),
        axis_azimuth_deg=t.number("axis_azimuth_deg", 180.0, lo=0, hi=360),
        max_angle_deg=t.number("max_angle_deg", 60.0, lo=1, hi=90),
        backtrack=t.get("backtrack", bool, True),
        stow_wind_speed_ms=t.number("stow_wind_speed_ms", None, lo=1, hi=60),
        stow_angle_deg=t.number("stow_angle_deg", 0.0, lo=-90, hi=90),
    )


def _bifacial(t: Table, bifaciality: float) -> Bifacial:
    return Bifacial(bifaciality=bifaciality,
                    row_height_m=t.number("row_height_m", lo=0.1, hi=20),
                    row_pitch_m=t.number("row_pitch_m", lo=0.5, hi=100))


def _column(t: Table, inverter_ids: set[str], tall: bool = False) -> Column:
    quantity = t.get("quantity", str, choices=tuple(QUANTITIES))
    units = QUANTITIES[quantity][1]
    unit = t.get("unit", str, "code" if quantity == "status" else ...)
    if unit not in units:
        raise t._err("unit", f"unit {unit!r} not recognised for {quantity} (use one of "
                     f"{', '.join(units)})")
    if tall:  # the row's device column names the device (see _tall_columns)
        device = "site" if quantity not in DEVICE_QUANTITIES and quantity != "status" else ""
    elif quantity in DEVICE_QUANTITIES or quantity == "status":
        device = t.get("inverter", str, "plant")
        if device != "plant" and device not in inverter_ids:
            raise t._err("inverter", f"{device!r} is not an inverter id of this site "
                         f"(ids: {', '.join(sorted(inverter_ids))}, or 'plant')")
    else:
        device = "site"
    rollover = t.number("rollover", None, lo=0) if quantity == "energy_register" else None
    resets = t.get("resets", str, None, ("daily",)) if quantity == "energy_register" else None
    col = Column(
        name=t.get("name", str),
        quantity=quantity,
        unit=unit,
        device=device,
        rollover_wh=None if rollover is None else rollover * _ENERGY_SCALE[unit],
        resets_daily=resets == "daily",
        states=_states(t) if quantity == "status" else (),
    )
    t.done()
    return col


def _states(t: Table) -> tuple[tuple[str, str], ...]:
    """A status column's ``states`` table: each logger code (a key; integer codes written as
    quoted keys, ``"7" = ...``) to one of STATES."""
    table = t.table("states", required=True)
    out = []
    for code in table.data:
        state = table.get(code, str, choices=STATES)
        if not code.strip():
            raise table._err(code, "a status code must not be blank")
        out.append((code.strip(), state))
    if not out:
        raise t._err("states", "expected at least one code, e.g. { \"OK\" = \"running\" }")
    table.done()
    return tuple(out)


_ENERGY_SCALE = {"Wh": 1.0, "kWh": 1e3, "MWh": 1e6}


def _logger(t: Table, inverter_ids: set[str]) -> Logger:
    tt = t.table("time", required=True)
    cols = tt.get("columns", list)
    if not cols or not all(isinstance(c, str) for c in cols) or len(cols) > 2:
        raise tt._err("columns", "expected one or two column names, e.g. [\"Date\", \"Time\"]")
    kind = tt.get("kind", str, choices=TIME_KINDS)
    fmt = tt.get("format", str, None)
    if kind in ("utc", "local") and fmt is None:
        fmt = "%Y-%m-%d %H:%M:%S"
    time = TimeSpec(tuple(cols), kind, fmt, tt.get("label", str, "start", LABELS))
    tt.done()
    interval = t.get("interval_min", int)
    if interval not in (1, 5, 10, 15, 30, 60):
        raise t._err("interval_min", f"{interval} is not one of 1, 5, 10, 15, 30, 60")
    delimiter = t.get("delimiter", str, ",")
    if delimiter == "\\t":
        delimiter = "\t"
    if delimiter not in (",", ";", "\t", "|"):
        raise t._err("delimiter", "expected one of ',', ';', '\\t', '|'")
    sentinels = t.get("sentinels", list, [])
    if not all(isinstance(s, str) for s in sentinels):
        raise t._err("sentinels", "expected strings, e.g. [\"-9999\", \"#N/A\"]")
    device_column = t.get("device_column", str, None)
    point_column = t.get("point_column", str, None)
    value_column = t.get("value_column", str, None)
    if (point_column is None) != (value_column is None):
        raise t._err("value_column" if value_column is None else "point_column",
                     "give point_column and value_column together (a historian export: one "
                     "row per time, device and point)")
    if point_column is not None and device_column is None:
        raise t._err("point_column", "needs device_column (the column naming each row's "
                     "device)")
    if point_column is not None and t.data.get("units_row"):
        raise t._err("units_row", "a historian export (point_column) has no units row")
    carry = t.get("carry_forward_min", int, None)
    if carry is not None and point_column is None:
        raise t._err("carry_forward_min", "only a historian export (point_column) writes a "
                     "value only when it changed")
    if carry is not None and not 1 <= carry <= 1440:
        raise t._err("carry_forward_min", f"{carry} is outside the range 1 to 1440")
    tables = t.tables("columns")
    columns = tuple(_column(c, inverter_ids, device_column is not None) for c in tables)
    names = [c.name for c in columns] + list(time.columns) + [device_column] * bool(
        device_column)
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise t._err("columns", f"column {sorted(dup)[0]!r} is mapped twice")
    devices: tuple[tuple[str, str], ...] = ()
    if device_column is not None:
        devices = _devices(t, inverter_ids)
        columns = _tall_columns(t, columns, devices)
    elif "devices" in t.data:
        raise t._err("devices", "needs device_column (the column naming each row's device)")
    lg = Logger(
        name=t.get("name", str),
        match=t.get("match", str, "*"),
        delimiter=delimiter,
        decimal=t.get("decimal", str, ".", (".", ",")),
        preamble_lines=t.get("preamble_lines", int, 0),
        units_row=t.get("units_row", bool, False),
        interval_min=interval,
        time=time,
        sentinels=tuple(sentinels),
        columns=columns,
        device_column=device_column,
        devices=devices,
        point_column=point_column,
        value_column=value_column,
        carry_forward_min=carry,
    )
    if lg.preamble_lines < 0:
        raise t._err("preamble_lines", "expected 0 or more")
    t.done()
    return lg


def _sensor_on_tracker(mt: Table, inverters: list[Inverter]) -> bool:
    """``poa_sensor_on_tracker``: as given, else true when the first array (whose plane is the
    sensor's by default) is a tracker and no fixed sensor plane is given. A sensor on a
    tracker needs a tracker array and has no fixed plane."""
    plane_keys = [k for k in ("poa_sensor_tilt_deg", "poa_sensor_azimuth_deg") if k in mt.data]
    default = inverters[0].arrays[0].tracker is not None and not plane_keys
    if not mt.get("poa_sensor_on_tracker", bool, default):
        return False
    if not any(a.tracker for inv in inverters for a in inv.arrays):
        raise mt._err("poa_sensor_on_tracker", "no array has tracking = \"single_axis\"")
    if plane_keys:
        raise mt._err(plane_keys[0], "a sensor on a tracker has no fixed plane (remove the key "
                      "or set poa_sensor_on_tracker = false)")
    return True
def _devices(t: Table, inverter_ids: set[str]) -> tuple[tuple[str, str], ...]:
    """A tall logger's ``devices`` table: each device name the file writes to an inverter id,
    ``plant`` or ``site``."""
    table = t.table("devices", required=True)
    targets = (*sorted(inverter_ids), "plant", "site")
    out = tuple((name.strip(), table.get(name, str, choices=targets)) for name in table.data)
    if not out:
        raise t._err("devices", 'expected at least one device, e.g. { "WR 1" = "INV1" }')
    table.done()
    return out


def _tall_columns(t: Table, columns: tuple[Column, ...], devices: tuple[tuple[str, str], ...]
                  ) -> tuple[Column, ...]:
    """A tall logger's mapped columns, one per device each feeds: a device quantity (power,
    energy, status) for every inverter and the plant among ``devices``, a weather quantity for
    the devices mapped to ``site``."""
    out = []
    for i, col in enumerate(columns):
        targets = [d for d in dict.fromkeys(dev for _, dev in devices)
                   if (d == "site") == (col.device == "site")]
        if not targets:
            raise t._err(f"columns[{i}]", f"{col.quantity} needs a device mapped to "
                         f"{'site' if col.device == 'site' else 'an inverter or plant'} in "
                         "devices")
        out += [dataclasses.replace(col, device=d, when_device=tuple(
            name for name, dev in devices if dev == d)) for d in targets]
    return tuple(out)


def load_site(path: str | Path) -> Site:
    """Read and validate a site file.

    Raises :class:`SiteFileError` with the key path and the expectation on any problem.
    """
    path = Path(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise SiteFileError(f"{path}: site file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise SiteFileError(f"{path}: cannot read site file ({exc})") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SiteFileError(f"{path}: not valid TOML: {exc}") from None
    except RecursionError:
        raise SiteFileError(f"{path}: not a usable site file: arrays or tables nested too deep "
                            "for the TOML reader") from None
    return parse_site(raw, path)


def parse_site(raw: dict[str, Any], path: Path) -> Site:
    top = Table(raw, "", path)
    s = top.table("site", required=True)
    tzname = s.get("timezone", str)
    try:
        zoneinfo.ZoneInfo(tzname)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        raise s._err("timezone", f"unknown IANA time zone {tzname!r} (e.g. 'Europe/Berlin')")\
            from None
    albedo = s.number("albedo", 0.2, lo=0, hi=1)
    horizon = _horizon(s, "horizon", ())
    site_fields = dict(
        name=s.get("name", str),
        latitude_deg=s.number("latitude_deg", lo=-90, hi=90),
        longitude_deg=s.number("longitude_deg", lo=-180, hi=180),
        altitude_m=s.number("altitude_m", 0.0, lo=-500, hi=9000),
        timezone=tzname,
        commissioned=s.get("commissioned", dt.date, None),
        module_age_years=s.number("module_age_years_at_first_data", None, lo=0, hi=60),
        export_limit_kw=s.number("export_limit_kw", None, lo=0),
        inbox=s.get("inbox", str, None),
    )
    s.done()
    if site_fields["commissioned"] is not None and site_fields["module_age_years"] is not None:
        raise s._err("module_age_years_at_first_data", "give either commissioned or "
                     "module_age_years_at_first_data, not both")

    inverters = []
    for t in top.tables("inverters"):
        night = t.number("night_tare_w", 0.0, lo=0)
        arrays = tuple(_array(a, albedo, horizon) for a in t.tables("arrays"))
        inv = Inverter(
            id=t.get("id", str),
            ac_kw=t.number("ac_kw", lo=0.001, hi=1e6),
            efficiency_pct=t.number("efficiency_pct", 96.0, lo=50, hi=100),
            arrays=arrays,
            night_tare_w=night,
        )
        t.done()
        inverters.append(inv)
    ids = [i.id for i in inverters]
    if len(set(ids)) != len(ids) or "plant" in ids or "site" in ids:
        raise SiteFileError(f"{path}: inverters: ids must be unique and not 'plant' or 'site'")

    lt = top.table("losses")
    losses = Losses(
        **{k: lt.number(k, getattr(Losses, k), lo=0, hi=50) for k in Losses.__dataclass_fields__}
    )
    lt.done()

    mt = top.table("model")
    model = Model(
        irradiance_source=mt.get("irradiance_source", str, "auto", IRRADIANCE_SOURCES),
        poa_sensor_kind=mt.get("poa_sensor_kind", str, "pyranometer", POA_SENSOR_KINDS),
        poa_sensor_tilt_deg=mt.number("poa_sensor_tilt_deg", None, lo=0, hi=90),
        poa_sensor_azimuth_deg=mt.number("poa_sensor_azimuth_deg", None, lo=0, hi=360),
        poa_sensor_on_tracker=_sensor_on_tracker(mt, inverters),
        decomposition=mt.get("decomposition", str, "disc", DECOMPOSITIONS),
        transposition=mt.get("transposition", str, "perez", TRANSPOSITIONS),
        temperature_model=mt.get("temperature_model", str, "sapm", TEMPERATURE_MODELS),
        iam=mt.get("iam", str, "physical", IAM_MODELS),
        poa_uncertainty_pct=mt.number("poa_uncertainty_pct", None, lo=0, hi=50),
        sensor_class=mt.get("sensor_class", str, "A", ("A", "B", "C")),
        sensor_stability_pct_per_year=mt.number("sensor_stability_pct_per_year", None, lo=0,
                                                hi=20),
        precipitable_water_cm=mt.number("precipitable_water_cm", REFERENCE_PRECIPITABLE_WATER_CM,
                                        lo=0.1, hi=8),
    )
    mt.done()

    loggers = tuple(_logger(t, set(ids)) for t in top.tables("loggers"))
    names = [lg.name for lg in loggers]
    if len(set(names)) != len(names):
        raise SiteFileError(f"{path}: loggers: names must be unique")
    # Sections that later stages read are validated by those stages; accept them here.
    for later in ("metrics", "detect", "guarantees", "report", "meter", "corrections"):
        top.used.add(later)
    top.done()
    return Site(
        inverters=tuple(inverters),
        losses=losses,
        model=model,
        loggers=loggers,
        path=path,
        raw=raw,
        **site_fields,
    )
