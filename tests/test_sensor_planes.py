"""The POA sensor where it feeds an inverter only in part (arrays in several planes, the sensor
in one of them), on invented rows (tests/detect_synth.py).

Such an inverter's plane irradiance mixes the sensor's reading with a modelled plane, so a
stuck sensor does not show in it: the stuck test reads the sensor's own reading.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
from detect_synth import TZ, make_aligned, make_site

from perfcheck import detect
from perfcheck.detect import common, sensor


@pytest.fixture(scope="module")
def mixed():
    site = make_site(n_inverters=1)
    df = make_aligned(site, start="2024-06-01", days=20)
    w = common.wide(df, {"INV1": 10e3}, None, site.tz)
    # the inverter's irradiance is no longer the sensor's alone
    w = dataclasses.replace(w, from_sensor=w.from_sensor & False)
    cs = common.clearsky_poa(w, site.latitude_deg, site.longitude_deg, site.altitude_m,
                             detect._planes(site, w))
    clear = common.clear_days(w, cs[w.inverters])
    reading = w.poa["INV1"].copy()
    stuck = (w.index >= pd.Timestamp("2024-06-10 11:00", tz=TZ)) & (
        w.index < pd.Timestamp("2024-06-10 15:00", tz=TZ))
    reading[stuck] = 612.3
    return w, cs, clear, reading


def test_stuck_sensor_found_in_its_own_reading(mixed):
    w, cs, clear, reading = mixed
    shares = pd.Series({"INV1": 0.5})
    assert sensor.sensor_columns(w) == []
    found = [s for s in sensor.find(w, clear, cs, reading=reading, shares=shares)
             if s.mode == "stuck"]
    # identical readings over four hours of daylight (module docstring: they do not occur by
    # chance; common practice)
    assert len(found) == 1
    assert found[0].start == pd.Timestamp("2024-06-10 11:00", tz=TZ)
    assert found[0].end == pd.Timestamp("2024-06-10 15:00", tz=TZ)
    # without the reading the mixed plane irradiance hides it
    assert not [s for s in sensor.find(w, clear, cs, shares=shares) if s.mode == "stuck"]


def test_correction_takes_the_error_in_the_sensor_share(mixed):
    w, _, _, _ = mixed
    # an inverter fed by the sensor in half its DC sees half a 10 % error of the sensor (first
    # order: power proportional to irradiance, common practice)
    s = sensor.Suspect(start=w.index[0], end=w.index[-1], mode="level", factor=0.9,
                       evidence={}, daily_factor=pd.Series(0.9, index=w.day.unique()),
                       shares={"INV1": 0.5})
    out = sensor.corrected(w, [s])
    ratio = (out.expected["INV1"] / w.expected["INV1"]).dropna()
    np.testing.assert_allclose(ratio.to_numpy(), 1 / 0.95)


def test_reading_carried_to_another_plane_drives_the_inverter(mixed):
    # An inverter whose arrays take the sensor's reading carried to their planes (model:
    # poa_source 'translated') moves with a sensor fault as one in the sensor's plane does:
    # it is driven, though its plane irradiance is not the sensor's own reading. Where its
    # irradiance was transposed from GHI instead (here the mornings), a sensor error found
    # from the power leaves the series alone (first order: power proportional to irradiance,
    # common practice).
    w, _, _, _ = mixed
    assert sensor.has_ghi(w)
    assert sensor.driven_columns(w) == []
    morning = (w.index.tz_convert(TZ).hour < 10)[:, None]
    w = dataclasses.replace(w, translated=w.translated | ~morning)
    assert sensor.sensor_columns(w) == [] and sensor.driven_columns(w) == ["INV1"]
    s = sensor.Suspect(start=w.index[0], end=w.index[-1], mode="level", factor=0.9,
                       evidence={}, daily_factor=pd.Series(0.9, index=w.day.unique()))
    out = sensor.corrected(w, [s])
    ratio = out.expected["INV1"] / w.expected["INV1"]
    day = w.expected["INV1"] > 0
    np.testing.assert_allclose(ratio[day & ~morning[:, 0]], 1 / 0.9)
    np.testing.assert_allclose(ratio[day & morning[:, 0]], 1.0)


def test_an_inverter_carried_from_the_sensor_in_part_is_no_reference():
    # invented truth: three inverters, the sensor 6 % high from 10 June to 15 July; INV3's
    # arrays lie in another plane, whose irradiance the model carries from the sensor's
    # reading in the afternoons (4 of 10 daylight hours or so: not driven) and transposes from
    # GHI in the mornings. Taken as a reference of what moves every inverter but the sensor,
    # INV3 would take back a good part of the fault from the driven inverters' index; it is
    # neither, and the fault is found from the power with its window
    site = make_site(n_inverters=3)
    df = make_aligned(site, start="2024-05-01", days=100, seed=5, faults=[
        {"kind": "sensor", "start": "2024-06-10 00:00", "end": "2024-07-15 00:00",
         "scale": 1.06}])
    w = common.wide(df, {c: 10e3 for c in ("INV1", "INV2", "INV3")}, None, site.tz)
    hour = w.index.tz_convert(TZ).hour.to_numpy()
    morning = hour < 14
    own = w.from_sensor.copy()
    own["INV3"] = False
    carried = w.translated.copy()
    carried["INV3"] = ~morning
    exp, pot = w.expected.copy(), w.potential.copy()
    for frame, modelled in ((exp, w.expected_modelled), (pot, w.potential_modelled)):
        frame.loc[morning, "INV3"] = modelled["INV3"].to_numpy()[morning]
    w = dataclasses.replace(w, from_sensor=own, translated=carried, expected=exp, potential=pot)
    assert sensor.driven_columns(w) == ["INV1", "INV2"]
    cs = common.clearsky_poa(w, site.latitude_deg, site.longitude_deg, site.altitude_m,
                             detect._planes(site, w))
    (s,) = sensor.find(w, common.clear_days(w, cs[w.inverters]), cs)
    assert abs(s.start - pd.Timestamp("2024-06-10", tz=TZ)) <= pd.Timedelta(days=1)
    assert abs(s.end - pd.Timestamp("2024-07-15", tz=TZ)) <= pd.Timedelta(days=1)
    assert s.factor == pytest.approx(1.06, abs=0.015)
