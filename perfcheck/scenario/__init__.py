"""The invented demo scenario: a deterministic generator of logger files with known faults.

The site ("Solarpark Talbrunn", four inverters in an invented village in Lower Austria, three on
fixed racks and one on single-axis trackers with bifacial modules) does not exist; every number
in ``demo_logs/`` is written by :func:`generate` from seeded ``numpy.random.Generator`` streams
(one for the weather, one for the sensors and logger files, one each for two later sensors),
so the same arguments give the same bytes. The analysis stages must find the faults from the
logger files alone: nothing here is imported by them, and ``truth.json`` / ``truth_daily.csv``
are only for scoring.

Modules: :mod:`.sitefile` (the commented example site file), :mod:`.weather` (clear sky times a
stochastic clear-sky index, temperature, wind, rain), :mod:`.plant` (pvlib physics, faults
switched on stage by stage), :mod:`.logs` (sensors and the two loggers' files), :mod:`.truth`
(energy of every fault in a fixed order of attribution), :mod:`.faults` (the schedule).

``python -m perfcheck.scenario OUT_DIR`` writes the demo into OUT_DIR.
"""

from __future__ import annotations

import datetime as dt
import importlib.resources
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from perfcheck.scenario.faults import ATTRIBUTION_ORDER, NO_FAULTS, Faults, iso
from perfcheck.scenario.logs import (
    ANGLE_NOISE_DEG,
    sensor_readings,
    write_main_logger,
    write_weather_station,
)
from perfcheck.scenario.plant import dobos_ac, make_physics
from perfcheck.scenario.sitefile import TRACKER_INVERTER, site_text
from perfcheck.scenario.truth import energy_truth
from perfcheck.scenario.weather import DAY_TYPES, Weather, make_weather
from perfcheck.site import load_site

__all__ = [
    "ATTRIBUTION_ORDER", "DAY_TYPES", "DEFAULT_DAYS", "DEFAULT_SEED", "DEFAULT_START", "Faults",
    "Weather", "demo_dir", "dobos_ac", "generate", "main", "make_weather", "site_text",
]

DEFAULT_SEED = 61724
DEFAULT_START = dt.date(2024, 5, 1)
DEFAULT_DAYS = 730
GENERATOR_VERSION = "3"
# Truth entries that describe how the loggers write, not faults of the plant or its sensors.
LOGGER_HABITS = ("meter_reset", "duplicate_export", "sentinels")
ATTRIBUTION_RULE = (
    "faults are switched on one after another in this order; each fault's energy_loss_kwh is "
    "the AC energy before it minus the AC energy after it, so the losses add up to clean minus "
    "faulted energy. Entries with design=true (natural clipping, the design export limit) "
    "belong to the clean plant and are not part of that sum. Sensor and logger faults lose no "
    "energy (0 kWh)."
)


def generate(
    out_dir: str | Path,
    *,
    start: dt.date | str | None = None,
    days: int | None = None,
    faults: bool = True,
    pure_noise: bool = False,
    seed: int = DEFAULT_SEED,
    interval_min: int = 5,
) -> Path:
    """Write the demo site (site.toml, logger files, truth.json, truth_daily.csv) to ``out_dir``.

    Parameters
    ----------
    out_dir : folder to write into (created if needed; earlier demo files there are replaced).
    start : first local day, also the commissioning date (default 2024-05-01).
    days : number of days (default 730).
    faults : inject the schedule of :class:`Faults`; False gives the fault-free plant under
        the same weather with the same sensor noise and clean logger files.
    pure_noise : no faults, and 3 % white noise on the measured power instead of 0.2 %: a
        plant that only scatters around its model, for checking that detectors stay silent.
    seed : seed of the random streams.
    interval_min : logger interval [min] (5 by default; the weather station writes 10-minute
        means when the interval divides 10).

    Returns
    -------
    The output folder.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    start = dt.date.fromisoformat(start) if isinstance(start, str) else (start or DEFAULT_START)
    days = DEFAULT_DAYS if days is None else days
    schedule = Faults() if faults and not pure_noise else NO_FAULTS
    for old in [*out.glob("talbrunn_*.csv"), out / "truth.json", out / "truth_daily.csv"]:
        old.unlink(missing_ok=True)
    (out / "site.toml").write_bytes(site_text(start, interval_min).encode("utf-8"))
    site = load_site(out / "site.toml")
    # the DHI pyranometer's and the tracker inclinometer's streams were added later: the
    # streams before them are as before
    weather_rng, sensor_rng, dhi_rng, angle_rng = (
        np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(4))
    t0 = pd.Timestamp(start).tz_localize(site.tz)
    t1 = (pd.Timestamp(start) + pd.Timedelta(days=days)).tz_localize(site.tz)
    times = pd.date_range(t0, t1, freq=f"{interval_min}min", inclusive="left").tz_convert("UTC")
    times = times.as_unit("ns")
    weather = make_weather(site, times, interval_min, weather_rng)
    ph = make_physics(site, times, weather, schedule)
    plant, daily, entries = energy_truth(site, ph, schedule, interval_min)
    readings, sensor_truth = sensor_readings(site, times, weather, ph, plant, schedule,
                                             sensor_rng, dhi_rng, interval_min,
                                             0.03 if pure_noise else 0.002)
    entries += sensor_truth
    angle = ph.rotation[TRACKER_INVERTER] + ANGLE_NOISE_DEG * angle_rng.standard_normal(
        len(times))
    entries += write_main_logger(out, site, times, weather, plant, readings, schedule,
                                 sensor_rng, interval_min, angle)
    entries += write_weather_station(out, site, times, weather, plant, readings, schedule,
                                     interval_min)
    daily.round(4).to_csv(out / "truth_daily.csv", index=False, lineterminator="\n")
    tz = site.tz
    local_days = times.tz_convert(tz).normalize().unique()
    truth = {
        "scenario": {
            "site": site.name, "generator_version": GENERATOR_VERSION, "seed": seed,
            "start": iso(times[0], tz), "end": iso(times[-1] + (times[1] - times[0]), tz),
            "interval_min": interval_min, "faults": schedule != NO_FAULTS,
            "pure_noise": pure_noise,
        },
        "attribution": {"order": list(ATTRIBUTION_ORDER), "rule": ATTRIBUTION_RULE},
        "totals": {
            "clean_energy_kwh": round(float(daily["clean_energy_kwh"].sum()), 3),
            "energy_kwh": round(float(daily["energy_kwh"].sum()), 3),
        },
        "faults": [e for e in entries if e["kind"] not in LOGGER_HABITS],
        "logger_habits": [e for e in entries if e["kind"] in LOGGER_HABITS],
        "day_types": {str(d.date()): DAY_TYPES[t]
                      for d, t in zip(local_days, weather.day_type, strict=True)},
    }
    (out / "truth.json").write_text(json.dumps(truth, indent=1, ensure_ascii=False) + "\n",
                                    encoding="utf-8")
    return out


def demo_dir() -> Path:
    """The shipped demo: ``perfcheck/demo_logs`` in a wheel, ``demo_logs/`` in a checkout."""
    packaged = importlib.resources.files("perfcheck") / "demo_logs"
    if packaged.is_dir():
        return Path(str(packaged))
    return Path(__file__).resolve().parents[2] / "demo_logs"


def main(argv: list[str] | None = None) -> int:
    """``python -m perfcheck.scenario OUT_DIR``."""
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 1 or args[0].startswith("-"):
        print("usage: python -m perfcheck.scenario OUT_DIR   (writes the demo site into OUT_DIR)",
              file=sys.stderr)
        return 2
    print(generate(args[0]))
    return 0
