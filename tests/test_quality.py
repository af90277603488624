"""Quality flags on a synthetic day (invented data: a smooth clear day with noise)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from logger_files import checked, write_case
from numpy.testing import assert_allclose

from perfcheck import db, physics, quality
from perfcheck.site import load_site

COLUMNS = (("P", "ac_power", "kW", "INV1"), ("G", "poa", "W/m2", None),
           ("T", "temp_air", "C", None), ("W", "wind_speed", "m/s", None))
DAY = pd.date_range("2024-06-01 00:00", "2024-06-01 23:55", freq="5min", tz="UTC")


def clear_day():
    """A plausible 5-minute day for the test site: POA from the sun's height, power from POA."""
    rng = np.random.default_rng(7)
    sun = quality.sun_table(SUN, DAY, 5)
    poa = np.round(1000 * sun["mu0"].to_numpy() ** 1.1 + rng.normal(0, 3, len(DAY)), 1)
    poa = np.where(sun["elevation_deg"] < 0, np.round(rng.normal(-1, 0.3, len(DAY)), 1), poa)
    power_kw = np.round(np.clip(poa, 0, None) * 0.009 * rng.uniform(0.98, 1.0, len(DAY)), 3)
    return pd.DataFrame({
        "ts": DAY.strftime("%Y-%m-%d %H:%M"),
        "P": power_kw,
        "G": poa,
        "T": np.round(15 + 10 * sun["mu0"].to_numpy() + rng.normal(0, 0.3, len(DAY)), 1),
        "W": np.round(3 + rng.uniform(-1.5, 1.5, len(DAY)), 1),
    }), sun


SUN = physics.SunPositions(48.0, 11.0, 500.0)  # the site of logger_files.SITE


def flagged(tmp_path, frame, drop=(), columns=COLUMNS):
    frame = frame.drop(index=list(drop))
    site_path, log = write_case(tmp_path, frame.to_csv(index=False), columns=columns)
    _, counts, con, site = checked(tmp_path, site_path, log)
    flags = con.execute("SELECT ts, quantity, device, flag, detail FROM flags ORDER BY ts").df()
    flags["ts"] = pd.DatetimeIndex(flags["ts"]).tz_convert("UTC")
    return counts, flags, con, site


def of(flags, flag):
    return flags[flags["flag"] == flag]


def test_a_clean_day_has_no_flags(tmp_path):
    frame, _ = clear_day()
    counts, _, _, _ = flagged(tmp_path, frame)
    assert counts == dict.fromkeys(quality.FLAG_NAMES, 0)


def test_out_of_range(tmp_path):
    frame, sun = clear_day()
    noon = int(sun["elevation_deg"].idxmax())
    frame.loc[noon, "T"] = 57.0       # above the WMO record 56.7 C (from memory)
    frame.loc[noon + 1, "P"] = 11.5   # > 1.1 x the 10 kW rating (common practice)
    frame.loc[noon + 2, "W"] = -0.5   # negative wind speed
    frame.loc[10, "G"] = 150.0        # at night the POA limit is 100 W/m2 (BSRN form, mu0 0)
    _, flags, _, _ = flagged(tmp_path, frame)
    got = of(flags, "out_of_range")[["ts", "quantity"]].values.tolist()
    assert sorted(got) == sorted([
        [DAY[10], "poa_wm2"], [DAY[noon], "temp_air_c"], [DAY[noon + 1], "ac_power_w"],
        [DAY[noon + 2], "wind_speed_ms"]])


def test_bsrn_limits_follow_the_sun(tmp_path):
    # Long & Dutton 2002 (BSRN physically possible limits, from memory): GHI upper limit
    # Sa * 1.5 * mu0^1.2 + 100. Derived check: a GHI reading just above that limit at the
    # interval's sun position is flagged, one just below is not.
    frame, sun = clear_day()
    noon = int(sun["elevation_deg"].idxmax())
    limit = sun["sa_wm2"][noon] * 1.5 * sun["mu0"][noon] ** 1.2 + 100
    frame["H"] = 0.0
    frame.loc[noon, "H"] = round(limit + 1, 1)
    frame.loc[noon + 1, "H"] = round(limit - 30, 1)
    cols = (*COLUMNS, ("H", "ghi", "W/m2", None))
    site_path, log = write_case(tmp_path, frame.to_csv(index=False), columns=cols)
    _, _, con, _ = checked(tmp_path, site_path, log)
    rows = con.execute("SELECT ts FROM flags WHERE flag = 'out_of_range' AND quantity = "
                       "'ghi_wm2'").fetchall()
    assert [pd.Timestamp(r[0]).tz_convert("UTC") for r in rows] == [DAY[noon]]


def test_stuck_sensor_and_what_is_not_stuck(tmp_path):
    frame, sun = clear_day()
    noon = int(sun["elevation_deg"].idxmax())
    frozen = list(range(noon - 18, noon + 18))  # 3 hours around noon
    frame.loc[frozen, "G"] = frame.loc[noon - 18, "G"]
    # a clipping plateau at the 10 kW rating for 2 hours is physics, not a stuck sensor
    frame.loc[noon - 12:noon + 12, "P"] = 10.0
    _, flags, _, _ = flagged(tmp_path, frame)
    stuck = of(flags, "stuck")
    assert set(stuck["quantity"]) == {"poa_wm2"}
    assert list(stuck["ts"]) == [DAY[i] for i in frozen]
    assert "unchanged for 36 intervals" in stuck["detail"].iloc[0]


def test_gap(tmp_path):
    frame, _ = clear_day()
    _, flags, _, _ = flagged(tmp_path, frame, drop=(100, 101, 102))
    gaps = of(flags, "gap")
    assert set(gaps["quantity"]) == {"ac_power_w", "poa_wm2", "temp_air_c", "wind_speed_ms"}
    assert set(gaps["ts"]) == {DAY[100]}
    assert gaps["detail"].iloc[0] == ("3 missing interval(s) of 5 min, up to "
                                      f"{DAY[102]:%Y-%m-%d %H:%M} UTC")


def test_night_offset(tmp_path):
    frame, sun = clear_day()
    night = int(sun["elevation_deg"].idxmin())
    frame.loc[night, "G"] = -9.0       # beyond the class A allowance of 7 W/m2 (ISO 9060)
    frame.loc[night + 1, "G"] = -5.0   # within it
    _, flags, _, _ = flagged(tmp_path, frame)
    assert list(of(flags, "night_offset")["ts"]) == [DAY[night]]


def test_power_without_irradiance(tmp_path):
    frame, sun = clear_day()
    noon = int(sun["elevation_deg"].idxmax())
    night = int(sun["elevation_deg"].idxmin())
    frame.loc[noon, "G"] = 2.0    # the sensor reads nothing while the inverter makes 8 kW
    frame.loc[night, "P"] = 3.0   # 3 kW at midnight
    _, flags, _, _ = flagged(tmp_path, frame)
    got = of(flags, "power_without_irradiance")
    assert list(got["ts"]) == [DAY[noon], DAY[night]]  # local midnight is 23:16 UTC here
    assert got["detail"].iloc[0] == f"{1000 * frame.loc[noon, 'P']:.0f} W with poa_wm2 2.0 W/m2"
    assert "below the horizon" in got["detail"].iloc[1]


def test_run_recomputes_and_never_deletes_readings(tmp_path):
    frame, _ = clear_day()
    frame.loc[5, "T"] = 99.0
    first, _, con, site = flagged(tmp_path, frame)
    n = con.execute("SELECT count(*) FROM readings").fetchall()
    assert quality.run(con, site) == first
    assert con.execute("SELECT count(*) FROM readings").fetchall() == n


@pytest.mark.parametrize("interval", [5, 60])
def test_sun_table_matches_pvlib_at_midpoints(interval):
    # the sun is taken at the interval's mid-point (Reda & Andreas 2004 via pvlib)
    import pvlib

    starts = pd.date_range("2024-06-01 10:00", periods=3, freq=f"{interval}min", tz="UTC")
    got = quality.sun_table(physics.SunPositions(48.0, 11.0, 500.0), starts, interval)
    ref = pvlib.solarposition.get_solarposition(
        starts + pd.Timedelta(minutes=interval / 2), 48.0, 11.0, altitude=500.0, delta_t=None)
    assert_allclose(got["elevation_deg"], ref["apparent_elevation"], atol=1e-9)


def test_empty_database_has_no_flags(tmp_path):
    site_path, _ = write_case(tmp_path, "ts,P,G\n", columns=COLUMNS)
    con = db.connect(tmp_path / "site.duckdb")
    assert quality.run(con, load_site(site_path)) == dict.fromkeys(quality.FLAG_NAMES, 0)


def test_tracker_angle_and_rear_irradiance_channels(tmp_path):
    # A tracker angle outside +-90 deg is impossible (a tracker turns at most a right angle
    # from flat: geometry); an angle held for hours (at the limit, flat at night, in stow) is
    # designed behaviour, never "stuck". The rear irradiance takes the POA limits (BSRN form,
    # Long & Dutton 2002, from memory) and night offset: 150 W/m2 at night is both.
    frame, sun = clear_day()
    noon = int(sun["elevation_deg"].idxmax())
    frame["A"] = np.where(sun["elevation_deg"] > 0, -60.0, 0.0)  # at the limit all day
    frame.loc[noon, "A"] = 95.0
    frame["R"] = np.round(np.clip(frame["G"], 0, None) * 0.1, 1)
    frame.loc[10, "R"] = 150.0
    _, flags, _, _ = flagged(tmp_path, frame, columns=COLUMNS + (
        ("A", "tracker_angle", "deg", None), ("R", "poa_rear", "W/m2", None)))
    mine = flags[flags["quantity"].isin(["tracker_angle_deg", "poa_rear_wm2"])]
    got = sorted(zip(mine["ts"], mine["quantity"], mine["flag"], strict=True))
    assert got == [(DAY[10], "poa_rear_wm2", "night_offset"),
                   (DAY[10], "poa_rear_wm2", "out_of_range"),
                   (DAY[noon], "tracker_angle_deg", "out_of_range")]
