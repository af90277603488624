"""Clock faults of a logger: which channels a correction moves, and when a shift is real.

Invented plants from ``tests/detect_synth.py`` (pvlib clear sky and a day-type clearness
index). The rule behind the correction is common practice: a logger stamps every channel it
records with its one clock, so a clock error moves them all alike.
"""

from __future__ import annotations

import dataclasses
import types

import numpy as np
import pandas as pd
import pytest
from detect_synth import TRACKER, TZ, make_aligned, make_site

from perfcheck import detect, model
from perfcheck.detect import clock, common

CLOCK = {"kind": "clock", "start": "2024-04-10 00:00", "end": "2024-04-28 00:00",
         "minutes": 45}


def _clock_event(res):
    (ev,) = [e for e in res["events"] if e.kind == "clock_fault"]
    return ev


def test_loggers_of_the_site_file():
    # common practice: the site file says which logger records which channel
    site = make_site(n_inverters=2, sensors={"poa": "met"})
    lg = clock.loggers(site)
    assert lg.inverters == {"synthetic": ("INV1", "INV2"), "met": ()}
    assert (lg.poa, lg.ghi) == ("met", None)


@pytest.mark.parametrize("poa_logger", ["synthetic", "met"])
def test_correction_moves_the_sensor_only_when_it_shares_the_clock(poa_logger):
    # common practice: one clock per logger. With the POA sensor on the inverters' logger it
    # was labelled late with the power: the expected power built from it moves back too,
    # and inside the window measured and expected agree again as before the fault.
    site = make_site(n_inverters=2, sensors={"poa": poa_logger})
    same = poa_logger == "synthetic"
    df = make_aligned(site, faults=[{**CLOCK, "sensor": same}], days=60, seed=3)
    res = detect.analyse(df, site)
    ev = _clock_event(res)
    assert ev.detail["logger"] == "synthetic"
    assert ev.detail["poa_sensor_on_same_clock"] is same
    assert ev.detail["expected_shifted_for"] == (["INV1", "INV2"] if same else [])
    w = res["wide"]
    clean = make_aligned(site, faults=[], days=60, seed=3)
    exp_clean = clean.pivot(index="ts", columns="inverter_id", values="expected_ac_w")
    inside = (w.index >= ev.start + pd.Timedelta(days=1)) & (w.index < ev.end
                                                             - pd.Timedelta(days=1))
    # the expected series after the correction is the fault-free one (45 min is three
    # 15-min intervals exactly); 1 %: the synthetic cell temperature of the shifted rows
    # mixes the sensor's earlier reading with the air temperature of the row
    np.testing.assert_allclose(w.expected.to_numpy()[inside],
                               exp_clean.reindex(w.index).to_numpy()[inside], rtol=0.01,
                               atol=1.0)
    assert not [e for e in res["events"] if e.kind in ("outage", "curtailment")]


FOG = {"kind": "fog", "start": "2024-04-10 00:00", "end": "2024-05-10 00:00", "until_hour": 12,
       "kt": 0.25}


@pytest.mark.parametrize("sensors", [{"poa": "synthetic"}, {"poa": "synthetic", "ghi": "met"}])
def test_morning_fog_is_no_clock_fault(sensors):
    # Invented weather: a month of foggy mornings moves the centre of the day's power by
    # tens of minutes against the clear sky, as a clock would. The production still starts
    # and ends with the sun, so the midpoint of its span does not move by half that, as a
    # clock's would (first case: the clear sky the only reference); a GHI sensor on another
    # logger saw the same fog, and against it the power's centre did not move either.
    site = make_site(n_inverters=2, sensors=sensors)
    df = make_aligned(site, faults=[FOG], days=90, seed=5)
    res = detect.analyse(df, site)
    assert not [e for e in res["events"] if e.kind == "clock_fault"]


def test_a_tracker_stalled_facing_west_is_no_clock_fault():
    # Invented truth: the rows of a one-inverter tracker plant held 45 deg towards the west
    # for 18 days. Against the clear sky the power's centre moves by about two hours, as a
    # late clock's would, but the span of production moves by a fraction of that: a clock
    # moves its midpoint by half its offset at least (the end past the reference's day is
    # cut). No readings are moved back, so no outages are made at dusk; the stall is found.
    site = make_site(1, tracker=TRACKER)
    stall = {"kind": "stall", "inverter": "INV1", "start": "2024-04-10 11:00",
             "end": "2024-04-28 10:00", "angle": 45.0}
    df = make_aligned(site, faults=[stall], start="2024-03-01", days=70, seed=3)
    assert [e.kind for e in detect.analyse(df, site)["events"]] == ["tracker_stall"]


def test_offset_and_edges_measured_against_another_loggers_sensor():
    # Invented truth: labels 45 min late from 10 to 28 April. Against the GHI of another
    # logger clouds cancel: the offset within 5 min (a third of the 15-min interval, so the
    # correction rounds to the right number of intervals) and both edges on the day.
    site = make_site(n_inverters=2, sensors={"poa": "synthetic", "ghi": "met"})
    df = make_aligned(site, faults=[{**CLOCK, "sensor": True}], days=60, seed=3)
    ev = _clock_event(detect.analyse(df, site))
    assert ev.detail["offset_min"] == pytest.approx(45, abs=5)
    assert ev.evidence["measured_against"].startswith("expected power")
    assert ev.start == pd.Timestamp(CLOCK["start"], tz=TZ)
    assert ev.end == pd.Timestamp(CLOCK["end"], tz=TZ)


def test_daylight_saving_changes_of_a_zone():
    # EU Directive 2000/84/EC, art. 2-3: summer time from 01:00 UTC on the last Sunday of
    # March to 01:00 UTC on the last Sunday of October (2024: 31 March, 27 October)
    got = clock.changes(TZ, pd.Timestamp("2024-01-01", tz="UTC"),
                        pd.Timestamp("2025-01-01", tz="UTC"))
    assert got == [(pd.Timestamp("2024-03-31 01:00", tz="UTC"), -60.0),
                   (pd.Timestamp("2024-10-27 01:00", tz="UTC"), 60.0)]


def test_a_window_at_a_change_in_its_direction_is_tested_one_sided():
    # EU Directive 2000/84/EC, art. 2: summer time from 31 March 2024, 01:00 UTC; a logger
    # that missed it labels an hour early (-60 min). The calendar fixes that alternative
    # beforehand, so a window starting then with a negative offset takes the one-sided
    # p-value (half the two-sided one, Welch's t being symmetric); a positive offset, or a
    # window a week away, keeps the two-sided p-value (common practice)
    spring = pd.Timestamp("2024-03-31")
    assert clock._p_value(0.002, spring, -55.0, TZ) == pytest.approx(0.001)
    assert clock._p_value(0.002, spring, 55.0, TZ) == pytest.approx(0.002)
    assert clock._p_value(0.002, pd.Timestamp("2024-04-08"), -55.0, TZ) == pytest.approx(0.002)


def test_missed_change_set_to_the_change_exactly():
    # A window found a day after the spring change with -52 +- 6 min (a clear-sky estimate)
    # is the missed change: start at its instant, offset -60 (EU Directive 2000/84/EC). The
    # same estimate a week away from any change, or -30 +- 6 min, stays as estimated
    # (3.29 standard errors: the two-sided interval at alpha 1e-3).
    def shift(start, off):
        return clock.Shift(pd.Timestamp(start, tz=TZ).tz_convert("UTC"),
                           pd.Timestamp("2024-04-20", tz=TZ).tz_convert("UTC"), off, ("INV1",),
                           {"offset_standard_error_min": 6.0})
    s = clock.daylight_saving(shift("2024-04-01", -52.0), TZ, 1e-3)
    assert (s.start, s.offset_min) == (pd.Timestamp("2024-03-31 01:00", tz="UTC"), -60.0)
    assert s.evidence["missed_daylight_saving_change"]
    for start, off in (("2024-04-08", -52.0), ("2024-04-01", -30.0)):
        s = shift(start, off)
        assert clock.daylight_saving(s, TZ, 1e-3) == s


def test_missed_change_kept_when_the_readings_moved_back_leave_no_offset():
    # Invented estimate -57 +- 0.5 min, biased toward zero: its interval leaves out -60. The
    # readings moved back by the change's hour leave an offset with p-value 0.4 (not rejected
    # at alpha 1e-3): the change (no free parameter) is kept; with p 1e-5 the estimate stays.
    s = clock.Shift(pd.Timestamp("2024-04-01", tz=TZ).tz_convert("UTC"),
                    pd.Timestamp("2024-04-20", tz=TZ).tz_convert("UTC"), -57.0, ("INV1",),
                    {"offset_standard_error_min": 0.5})
    got = clock.daylight_saving(s, TZ, 1e-3, lambda c: 0.4 if c.offset_min == -60.0 else 0.0)
    assert (got.start, got.offset_min) == (pd.Timestamp("2024-03-31 01:00", tz="UTC"), -60.0)
    assert got.evidence["offset_left_p_value"] == 0.4
    assert clock.daylight_saving(s, TZ, 1e-3, lambda c: 1e-5) == s


def test_midspan_of_a_day_known_answer():
    # Worked by hand: on a 60-min grid from midnight, power above the floor from 06:00 to
    # 18:00 (intervals 6..18) has its span's midpoint at interval mid-points 6:30 and 18:30,
    # i.e. 12:30 = 750 min; shifting the labels 2 h later moves it by 120 min.
    site = make_site(n_inverters=1)
    df = make_aligned(site, days=2, freq_min=60)
    w = common.wide(df, {"INV1": 10_000.0}, None, TZ)
    day = w.day.to_numpy() == w.day.iloc[0]
    hour = w.index.tz_convert(TZ).hour.to_numpy()
    x = pd.DataFrame({"INV1": np.where(day & (hour >= 6) & (hour <= 18), 500.0, 0.0)},
                     index=w.index)
    got = clock.midspans(w, x, pd.Series({"INV1": 100.0}))["INV1"].iloc[0]
    assert w.index[0].tz_convert(TZ).hour == 0  # the origin: the first day's midnight
    assert got == pytest.approx(750.0)
    later = clock.midspans(w, x.shift(2).fillna(0.0), pd.Series({"INV1": 100.0}))["INV1"]
    assert later.iloc[0] - got == pytest.approx(120.0)


def test_model_run_again_on_the_readings_moved_back():
    # Invented truth: a logger recording the POA sensor (30 deg south) and both inverters'
    # power ran an hour early (a missed daylight-saving change) for a day; one inverter's
    # array faces west and is transposed from the sensor. The rule is common practice: one
    # clock per logger. After the correction the expected series of both inverters are those
    # of the model on the readings at their true time. Shifting the west array's expected
    # power instead leaves it off by more (its transposition took the sun of the wrong hour).
    site = make_site(n_inverters=2, sensors={"poa": "synthetic"})
    west = site.inverters[1]
    west = dataclasses.replace(west, arrays=(dataclasses.replace(west.arrays[0],
                                                                 azimuth_deg=270.0),))
    site = dataclasses.replace(site, inverters=(site.inverters[0], west))
    times = pd.date_range("2024-06-01", periods=3 * 96, freq="15min", tz="UTC")
    sun = model.site_sun(times, site, 900)
    true = pd.DataFrame({"poa_sensor": 0.9 * sun["clearsky_ghi"], "temp_air": 20.0,
                         "wind_speed": 2.0}, index=times)
    logged = true.shift(-4)  # the reading of true time t labelled t - 1 h

    def rows(weather):
        exp = model.expected_power(weather, sun, site)
        return exp.rename(columns={"ac_w": "expected_ac_w", "ac_potential_w": "potential_ac_w",
                                   "ac_modelled_w": "expected_ac_modelled_w",
                                   "ac_potential_modelled_w": "potential_ac_modelled_w",
                                   "poa_global_wm2": "poa_wm2"})

    df = rows(logged).assign(
        measured_ac_w=lambda d: d["expected_ac_w"], interval_s=900, flags="", ghi_wm2=np.nan,
        clearsky_ghi_wm2=np.tile(sun["clearsky_ghi"].to_numpy(), 2), rain_mm=np.nan,
        sun_zenith_deg=np.tile(sun["apparent_zenith"].to_numpy(), 2),
        sun_azimuth_deg=np.tile(sun["azimuth"].to_numpy(), 2))
    w = common.wide(df, {"INV1": 10e3, "INV2": 10e3}, None, TZ)
    shift = clock.Shift(times[96], times[192], -60.0, ("INV1", "INV2"), {}, "synthetic")
    lg = clock.loggers(site)
    fixed = clock.corrected(w, [shift], lg, site, lambda a, b: logged[
        (logged.index >= a) & (logged.index < b)].copy())
    truth = rows(true).pivot(index="ts", columns="inverter_id", values="expected_ac_w")
    inside = (w.index >= shift.start) & (w.index < shift.end)
    np.testing.assert_allclose(fixed.expected.to_numpy()[inside], truth.to_numpy()[inside],
                               atol=1e-6)
    shifted = clock.corrected(w, [shift], lg)
    err = np.abs(shifted.expected["INV2"] - truth["INV2"])[inside].sum()
    assert err > 0.01 * truth["INV2"][inside].sum()


def test_a_reference_on_the_shifted_logger_moves_back_with_it():
    # common practice: one clock per logger. A series built from a channel of the logger
    # whose labels ran 45 min late (the module temperature, a reference for the POA sensor)
    # is moved back by three 15-min rows inside the window, as the wide series are; a series
    # of another logger, or none, is left as it is
    idx = pd.date_range("2024-04-01", periods=96 * 4, freq="15min", tz="UTC")
    w = types.SimpleNamespace(index=idx, interval_s=pd.Series(900.0, index=idx))
    x = pd.Series(np.arange(len(idx), dtype=float), index=idx)
    s = clock.Shift(start=idx[96], end=idx[192], offset_min=45.0, inverters=(), evidence={},
                    logger="dl")
    moved = clock.moved_back(x, w, [s], "dl")
    inside = (idx >= idx[96]) & (idx < idx[192])
    np.testing.assert_array_equal(moved[inside].to_numpy(), x[inside].to_numpy() + 3)
    np.testing.assert_array_equal(moved[~inside].to_numpy(), x[~inside].to_numpy())
    assert clock.moved_back(x, w, [s], "met") is x
    assert clock.moved_back(None, w, [s], "dl") is None


def test_segments_of_one_offset_form_one_window():
    # invented segmentation: a steady reference at 0 min, then 55, 53 and 55 min for 7, 3 and
    # 18 days (a clean reference splits one offset where it wanders by two minutes), the
    # reference again, and later a clock 60 then 30 min late: the first three are one window
    # (they differ by less than the least offset reported, 20 min), the last two are two
    # (derived from the definition; common practice)
    levels = [(100, 0.0), (7, 55.0), (3, 53.0), (18, 55.0), (50, 0.0), (10, 60.0), (10, 30.0),
              (20, 0.0)]
    x = np.concatenate([np.full(n, v) for n, v in levels])
    stops = np.cumsum([n for n, _ in levels])
    segs = [common.Segment(int(b - n), int(b), v) for (n, v), b in zip(levels, stops, strict=True)]
    found = clock._windows(x, segs, segs[0], 20.0)
    assert [(g.start, g.stop) for g in found] == [(100, 128), (178, 188), (188, 198)]
    assert found[0].mean == pytest.approx((7 * 55 + 3 * 53 + 18 * 55) / 28)


def test_span_proposes_a_window_the_cloudy_centre_hides():
    # invented days: under a cloudy sky the daily power centre scatters by 35 min, the
    # midpoint of the span of production by 3 min (in 2.5-min steps); a clock 35 min early
    # for 7 days moves the centre by 50 min and the span by 35. Over a year the segmentation
    # of the centres finds no change (a 7-day shift of 1.4 standard deviations is within the
    # Bonferroni bound of all stretches), that of the spans does, and proposes the window
    # with the centres' mean over it (derived from the definitions; common practice)
    rng = np.random.default_rng(7)
    days = pd.date_range("2023-03-01", periods=365, freq="D")
    x = rng.normal(0.0, 35.0, 365)
    x[200:207] -= 50.0
    spans = pd.Series(np.round(rng.normal(0.0, 3.0, 365) / 2.5) * 2.5, index=days)
    spans.iloc[200:207] -= 35.0
    assert len(common.change_points(x, alpha=1e-3, min_size=3)) == 1
    (g,) = clock._span_windows(days, x, spans, [], 1e-3, 10.0, 3)
    assert (g.start, g.stop) == (200, 207)
    assert g.mean == pytest.approx(x[200:207].mean())
    # a window the centres' segmentation holds already is left to it
    assert clock._span_windows(days, x, spans, [common.Segment(199, 210, -40.0)], 1e-3, 10.0,
                               3) == []
