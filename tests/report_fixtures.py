"""Invented inputs for the report, evidence, guarantee and monthly tests.

A two-inverter site, a ``perfcheck check`` result of the documented shape and an aligned frame
built from a crude clear-sky day shape. All numbers are invented (synthetic, not a real plant).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

SITE_TOML = """\
[site]
name = "Hollowmere test array"
latitude_deg = 47.5
longitude_deg = 9.3
altitude_m = 420
timezone = "Europe/Zurich"
commissioned = 2024-04-01
inbox = "inbox/*.csv"
""" + "".join(f"""
[[inverters]]
id = "{inv}"
ac_kw = 50
[[inverters.arrays]]
dc_kwp = 60
tilt_deg = 25
azimuth_deg = 180
gamma_pct_per_c = -0.37
strings = 10
""" for inv in ("INV1", "INV2")) + """
[[loggers]]
name = "box"
match = "box_*.csv"
interval_min = 15
[loggers.time]
columns = ["time"]
kind = "iso"
[[loggers.columns]]
name = "p1"
quantity = "ac_power"
unit = "W"
inverter = "INV1"
"""

GUARANTEES_TOML = """
[guarantees]
confidence = 0.95
price_per_kwh = 0.10
currency = "EUR"

[guarantees.performance]
metric = "pr_temp_corrected"
yearly = [0.80, 0.795]
availability = 0.98

[guarantees.module_warranty]
first_year_loss_pct = 2.0
yearly_loss_pct = 0.55
"""


def checked(site, result: dict) -> dict:
    """The result with its guarantee findings, as ``perfcheck check`` adds them."""
    from perfcheck import guarantees

    result["guarantees"] = guarantees.evaluate(site, result)
    return result


def rendered_example(tmp):
    """Site and output paths of the example check rendered into ``tmp/out`` (no database)."""
    from perfcheck import report

    site = write_site(tmp)
    paths = report.render(site, checked(site, example_check()), example_aligned(),
                          {"files": [], "flags": []}, tmp / "out")
    return site, paths


def write_site(tmp_path, extra: str = GUARANTEES_TOML):
    from perfcheck.site import load_site

    path = tmp_path / "site.toml"
    path.write_text(SITE_TOML + extra, encoding="utf-8")
    return load_site(path)


def example_aligned(start="2025-06-01", days=30, step_min=15, seed=3) -> pd.DataFrame:
    """Two inverters; INV2 loses a third of its output from day 12 to day 18; rain on day 20."""
    rng = np.random.default_rng(seed)
    ts = pd.date_range(start, periods=days * 24 * 60 // step_min, freq=f"{step_min}min", tz="UTC")
    hour = (ts.hour + ts.minute / 60 + 0.5 * step_min / 60).to_numpy()
    elev = np.clip(62 * np.sin(np.pi * (hour - 4.5) / 15), -10, None)
    zen = 90 - elev
    az = 90 + (hour - 4.5) / 15 * 180
    cz = np.cos(np.radians(zen)).clip(0)
    cs = np.where(cz > 0, 1098 * cz * np.exp(-0.059 / np.maximum(cz, 1e-3)), 0)
    cloud = np.repeat(rng.uniform(0.45, 1.0, days), len(ts) // days)
    ghi = cs * cloud
    day = (ts - ts[0]).days.to_numpy()
    rain = np.where((day == 20) & (hour > 3) & (hour < 4), 2.0, 0.0)
    frames = []
    for inv in ("INV1", "INV2"):
        poa = ghi * 1.1
        potential = poa / 1000 * 60e3 * 0.86
        expected = np.minimum(potential, 50e3)
        factor = np.where((inv == "INV2") & (day >= 12) & (day < 18), 0.67, 1.0)
        soil = 1 - 0.002 * np.where(day < 20, day, day - 20)
        measured = expected * factor * soil * rng.normal(1, 0.02, len(ts))
        flags = np.where(rng.uniform(size=len(ts)) < 0.01, "stuck", "")
        frames.append(pd.DataFrame({
            "ts": ts, "inverter_id": inv, "interval_s": step_min * 60.0,
            "measured_ac_w": measured.clip(0), "expected_ac_w": expected,
            "potential_ac_w": potential, "expected_dc_w": potential / 0.96, "poa_wm2": poa,
            "poa_modelled_wm2": poa, "poa_source": "sensor", "ghi_wm2": ghi,
            "clearsky_ghi_wm2": cs, "temp_air_c": 20.0, "wind_speed_ms": 2.0,
            "temp_module_c": 20 + poa / 30, "temp_cell_c": 23 + poa / 30, "rain_mm": rain,
            "sun_zenith_deg": zen, "sun_azimuth_deg": az, "flags": flags,
        }))
    return pd.concat(frames, ignore_index=True)


def _month(month: str, pr: float, epi: float, coverage: float = 0.99) -> dict:
    return {
        "month": month, "start": f"{month}-01T00:00:00+02:00",
        "measured_kwh": 14200.0 * epi, "expected_kwh": 14200.0,
        "irradiation_kwh_m2": 165.0, "yr_h": 165.0, "yf_h": 165.0 * pr,
        "pr": pr, "pr_ci_low": pr - 0.012, "pr_ci_high": pr + 0.012,
        "pr_temp_corrected": pr + 0.03, "pr_temp_corrected_ci_low": pr + 0.017,
        "pr_temp_corrected_ci_high": pr + 0.043,
        "pr_weather_corrected": pr + 0.02, "pr_weather_corrected_ci_low": pr + 0.008,
        "pr_weather_corrected_ci_high": pr + 0.032,
        "epi": epi, "epi_ci_low": epi - 0.01, "epi_ci_high": epi + 0.01,
        "availability": 0.995, "availability_ci_low": 0.99, "availability_ci_high": 0.998,
        "specific_yield_kwh_per_kwp": 165.0 * pr, "coverage": coverage,
    }


def example_check(start="2025-06-01T00:00:00+02:00", end="2025-07-01T00:00:00+02:00") -> dict:
    """A ``perfcheck check`` result of the documented shape, with invented numbers."""
    monthly = [_month("2025-06", 0.781, 0.944)]
    period = dict(monthly[0])
    period.pop("month")
    return {
        "site": {"name": "Hollowmere test array", "dc_kwp": 120.0, "ac_kw": 100.0,
                 "timezone": "Europe/Zurich", "inverters": ["INV1", "INV2"]},
        "period": {"start": start, "end": end},
        "settings": {"min_poa_wm2": 50, "min_coverage": 0.8, "bootstrap_samples": 1000,
                     "seed": 1, "confidence": 0.95},
        "metrics": {"monthly": monthly, "period": period, "daily": []},
        "events": [
            {"kind": "partial_outage", "scope": "inverter:INV2",
             "start": "2025-06-13T00:00:00+02:00", "end": "2025-06-19T00:00:00+02:00",
             "energy_loss_kwh": 412.0, "energy_loss_kwh_low": 360.0,
             "energy_loss_kwh_high": 470.0, "method": "Binary segmentation on the sibling ratio",
             "evidence": {"dc_share_lost": 0.33, "strings_lost": 3.3, "p_value": 1e-6}},
            {"kind": "soiling", "scope": "plant", "start": "2025-06-01T00:00:00+02:00",
             "end": "2025-07-01T00:00:00+02:00", "energy_loss_kwh": 210.0,
             "energy_loss_kwh_low": 170.0, "energy_loss_kwh_high": 250.0,
             "method": "Deceglie, Micheli & Muller 2018 (stochastic rate and recovery)",
             "evidence": {"test": "Theil-Sen slope, Kendall tau (one-sided)",
                          "intervals": [{"from": "2025-06-01", "to": "2025-06-21",
                                         "rate_pct_per_day": -0.2}]},
             "loss_pct_of_expected": 1.5,
             "recoveries": [{"at": "2025-06-21", "cause": "rain", "rain_mm": 8.0}]},
            {"kind": "clipping", "scope": "plant", "start": "2025-06-02T10:00:00+02:00",
             "end": "2025-06-28T15:00:00+02:00", "energy_loss_kwh": 95.0,
             "energy_loss_kwh_low": 90.0, "energy_loss_kwh_high": 100.0,
             "method": "Plateau at the AC limit with unlimited expected power above it",
             "evidence": {"design": True, "dc_ac_ratio": 1.2}},
        ],
        "losses": {"expected_kwh": 14200.0, "measured_kwh": 13404.8,
                   "by_cause_kwh": {"partial_outage": 412.0, "soiling": 210.0,
                                    "clipping": 95.0},
                   "unexplained_kwh": 14200.0 - 13404.8 - 412.0 - 210.0 - 95.0,
                   "soiling_detection_limit": {
                       "loss_pct": 4.1, "daily_sigma_pct": 0.87, "days": 341, "alpha": 1e-3,
                       "washes_known_from_rain": False}},
        "degradation": {"rate_pct_per_year": None, "ci_ci_low": None, "ci_ci_high": None,
                        "method": "year-on-year (Jordan et al. 2018)",
                        "status": "not enough data"},
        "guarantees": [],
        "run": {"tool_version": "0.1.0", "created_at": "2025-07-02T04:00:00+00:00"},
    }
