"""The align stage: measured power from each kind of reading, flags, loading, monthly sums."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from model_fixtures import clear_days, make_site, open_db, store
from numpy.testing import assert_allclose

from perfcheck import align, model
from perfcheck.cli import main
from perfcheck.errors import DataError


def _ts(*hhmm: str) -> pd.Series:
    return pd.Series(pd.to_datetime([f"2024-06-01 {t}" for t in hhmm], utc=True))


def test_register_power_rollover_reset_and_gaps():
    # Steps of a cumulative register: 250 Wh per 15 min = 1000 W. Row 2 wraps at 1e6 Wh
    # (rollover), row 4 jumps by 599,750 Wh (a replaced meter), row 6 follows a gap.
    reg = pd.Series([999_500.0, 999_750.0, 0.0, 250.0, 600_000.0, 600_250.0, 600_750.0])
    ts = _ts("10:14", "10:29", "10:44", "10:59", "11:14", "11:29", "12:14")
    p = align.register_power(reg, ts, 900, 1_000_000.0, 5000.0)
    assert np.isnan(p.iloc[0])  # no previous reading
    assert_allclose(p.iloc[[1, 2, 3, 5]], [1000.0] * 4)
    assert np.isnan(p.iloc[4])  # 599,750 Wh in 15 min: far above 1.5 x 5 kW
    assert np.isnan(p.iloc[6])  # 45 minutes since the previous reading: cannot be placed
    reset = align.register_power(pd.Series([5000.0, 100.0, 350.0]), ts.iloc[:3], 900, None,
                                 5000.0)
    assert np.isnan(reset.iloc[1]) and reset.iloc[2] == 1000.0


def test_register_that_restarts_at_local_midnight():
    # Invented truth (issue 10, item 4): a day counter in Europe/Berlin (UTC+2 in June) ends
    # 2024-06-01 at 40,000 Wh (the reading of the interval starting 23:45 local, 21:45 UTC)
    # and restarts from 0 at midnight. The interval starting at local midnight (22:00 UTC)
    # reads the 25 Wh since midnight: 25 Wh in 15 min = 100 W. A drop within a day (a
    # glitch, row 4) stays unusable.
    ts = _ts("21:30", "21:45", "22:00", "22:15", "22:30")
    reg = pd.Series([39_975.0, 40_000.0, 25.0, 50.0, 10.0])
    p = align.register_power(reg, ts, 900, None, 5000.0, "Europe/Berlin")
    assert_allclose(p.iloc[[1, 2, 3]], [100.0, 100.0, 100.0])
    assert np.isnan(p.iloc[4])
    # without the key the restart is a reset: that interval is unknown
    assert np.isnan(align.register_power(reg, ts, 900, None, 5000.0).iloc[2])


def test_measured_power_prefers_ac_then_energy_then_register(tmp_path):
    site = make_site(tmp_path)
    ts = _ts("10:00", "10:15", "10:30")
    raw = pd.DataFrame({
        "ts": list(ts) * 2, "inverter_id": ["INV1"] * 3 + ["INV2"] * 3,
        "ac_power_w": [1000.0, np.nan, np.nan, np.nan, np.nan, np.nan],
        "energy_interval_wh": [np.nan, 300.0, np.nan, np.nan, np.nan, np.nan],
        "register_wh": [np.nan, np.nan, np.nan, 0.0, 500.0, 1000.0],
        "register_ts": list(ts) * 2,
    })
    out = align.measured_power(raw, site, 900, {}).set_index(["inverter_id", "ts"])
    inv1 = out.loc["INV1", "measured_ac_w"]
    assert_allclose(inv1.iloc[:2], [1000.0, 1200.0])  # 300 Wh per 15 min = 1200 W
    assert np.isnan(inv1.iloc[2])
    assert_allclose(out.loc["INV2", "measured_ac_w"].iloc[1:], [2000.0, 2000.0])


def _stored_site(tmp_path):
    site = make_site(tmp_path)
    con = open_db(tmp_path)
    w = clear_days("2024-06-30", 2)
    store(con, w, "site", file_id=1)
    store(con, pd.DataFrame({"ac_power_w": w["ghi_wm2"] * 7.0}, index=w.index), "INV1", 1)
    reg = (w["ghi_wm2"] * 7.0 * 0.25).cumsum()
    store(con, pd.DataFrame({"energy_register_wh": reg}, index=w.index), "INV2", 1)
    return site, con


def test_aligned_rows_columns_and_flags(tmp_path):
    site, con = _stored_site(tmp_path)
    flagged = pd.Timestamp("2024-06-30 10:05", tz="UTC")
    con.execute("INSERT INTO flags VALUES (?, 'ghi_wm2', 'site', 'stuck', ''), "
                "(?, 'ac_power_w', 'INV1', 'out_of_range', '')", [flagged, flagged])
    model.run(con, site)
    df = align.load_aligned(con, site)
    assert tuple(df.columns) == align.ALIGNED_COLUMNS
    assert str(df["ts"].dt.tz) == "UTC"
    assert len(df) == 2 * 96 * 2
    row = df[df["ts"] == pd.Timestamp("2024-06-30 10:00", tz="UTC")].set_index("inverter_id")
    assert row.loc["INV1", "flags"] == "out_of_range,stuck"
    assert row.loc["INV2", "flags"] == "stuck"  # the weather's flag reaches every inverter
    assert (df[df["ts"] != pd.Timestamp("2024-06-30 10:00", tz="UTC")]["flags"] == "").all()
    noon = df[(df["ts"].dt.hour == 11)].set_index("inverter_id")
    assert_allclose(noon.loc["INV1", "measured_ac_w"], noon.loc["INV1", "ghi_wm2"] * 7.0)
    # INV2's register steps: the last reading of the interval minus the previous one.
    inv2 = df[df["inverter_id"] == "INV2"].set_index("ts")["measured_ac_w"]
    ghi = df[df["inverter_id"] == "INV2"].set_index("ts")["ghi_wm2"]
    assert_allclose(inv2.iloc[1:], ghi.iloc[1:] * 7.0, rtol=1e-9)
    assert (df["interval_s"] == 900).all() and set(df["poa_source"]) == {"model"}
    assert df["sun_zenith_deg"].min() > 20 and df["clearsky_ghi_wm2"].max() > 800


def test_aligned_carries_the_modelled_poa_expected_power(tmp_path):
    # Synthetic truth (invented readings): a POA sensor in INV1's plane reading 10 % below a
    # plain 1.1 x GHI. The aligned rows carry the expected power from the modelled POA beside
    # the normal one: as the model's pure chain gives them from the stored weather; for INV1
    # (fed by the sensor) above the sensor's expected power at midday; for INV2 (other planes,
    # which take the sensor's reading carried to them where that depends less on the split of
    # GHI) the same as the normal expected power wherever its irradiance is the modelled one.
    site, con = _stored_site(tmp_path)
    w = clear_days("2024-06-30", 2)
    store(con, pd.DataFrame({"poa_wm2": w["ghi_wm2"] * 1.1 * 0.9}, index=w.index), "site", 1)
    model.run(con, site)
    df = align.load_aligned(con, site).set_index(["inverter_id", "ts"])
    weather = model.load_weather(con, 900, w.index[0], w.index[-1] + pd.Timedelta(minutes=15))
    pure = model.expected_power(weather, model.site_sun(weather.index, site, 900), site)
    pure = pure.set_index(["inverter_id", "ts"]).reindex(df.index)
    for stored, name in (("expected_ac_modelled_w", "ac_modelled_w"),
                         ("potential_ac_modelled_w", "ac_potential_modelled_w"),
                         ("temp_cell_modelled_c", "temp_cell_modelled_c")):
        assert_allclose(df[stored], pure[name], rtol=1e-12)
    inv1, inv2 = df.loc["INV1"], df.loc["INV2"]
    assert (inv1["poa_source"][inv1["poa_wm2"] > 100] == "sensor").all()
    noon = inv1.index.hour == 11
    assert (inv1.loc[noon, "expected_ac_modelled_w"] > inv1.loc[noon, "expected_ac_w"]).all()
    same = inv2["poa_wm2"] == inv2["poa_modelled_wm2"]
    assert same.any() and not same.all()
    for col in ("expected_ac", "potential_ac"):
        assert_allclose(inv2.loc[same, f"{col}_modelled_w"], inv2.loc[same, f"{col}_w"], rtol=0,
                        atol=0)


def test_inverter_readings_without_weather_are_aligned_alone(tmp_path):
    # Invented truth: a third day of INV1's AC power, in a file of its own, with no site
    # weather logged that day. Its rows (a piece of the model with no weather at all) carry the
    # measured power and no expected power (nothing to model it from).
    site, con = _stored_site(tmp_path)
    model.run(con, site)
    day3 = pd.date_range("2024-07-02", periods=96, freq="15min", tz="UTC")
    store(con, pd.DataFrame({"ac_power_w": 500.0}, index=day3), "INV1", 2)
    assert model.run(con, site)["rows"] == 0
    df = align.load_aligned(con, site).set_index(["inverter_id", "ts"])
    alone = df.loc["INV1"].loc[day3]
    assert (alone["measured_ac_w"] == 500.0).all()
    assert alone["expected_ac_w"].isna().all() and (alone["interval_s"] == 900).all()
    assert df.loc["INV1"]["expected_ac_w"].notna().sum() == 2 * 96


def test_load_aligned_bounds(tmp_path):
    site, con = _stored_site(tmp_path)
    with pytest.raises(DataError, match="run 'perfcheck model' first"):
        align.load_aligned(con, site)
    model.run(con, site)
    start = pd.Timestamp("2024-07-01 00:00", tz="Europe/Berlin")
    df = align.load_aligned(con, site, start, start + pd.Timedelta(hours=1))
    assert len(df) == 4 * 2  # end exclusive
    assert df["ts"].min() == start.tz_convert("UTC")
    with pytest.raises(ValueError, match="tz-aware"):
        align.load_aligned(con, site, pd.Timestamp("2024-07-01"))


def test_monthly_summary_local_months_and_ratio(tmp_path):
    site, con = _stored_site(tmp_path)
    model.run(con, site)
    s = align.monthly_summary(con, site).set_index(["inverter_id", "month"])
    # Months are site-local: 2024-06-30 22:00 UTC is already July in Berlin (UTC+2).
    assert set(s.index.get_level_values("month")) == {"2024-06", "2024-07"}
    df = align.load_aligned(con, site)
    july = df[df["ts"] >= pd.Timestamp("2024-07-01", tz="Europe/Berlin")]
    inv1 = july[july["inverter_id"] == "INV1"]
    assert_allclose(s.loc[("INV1", "2024-07"), "expected_kwh"],
                    inv1["expected_ac_w"].sum() * 900 / 3.6e6)
    both = inv1.dropna(subset=["measured_ac_w", "expected_ac_w"])
    assert_allclose(s.loc[("INV1", "2024-07"), "ratio"],
                    both["measured_ac_w"].sum() / both["expected_ac_w"].sum())
    plant = s.loc[("plant", "2024-07")]
    assert_allclose(plant["expected_kwh"], s.loc[("INV1", "2024-07"), "expected_kwh"]
                    + s.loc[("INV2", "2024-07"), "expected_kwh"])


def test_cli_model(tmp_path):
    site, con = _stored_site(tmp_path)
    con.close()
    res = CliRunner().invoke(main, ["model", str(tmp_path / "site.toml")])
    assert res.exit_code == 0, res.output
    assert "INV1" in res.output and "plant" in res.output and "2024-07" in res.output
    empty = tmp_path / "empty"
    empty.mkdir()
    make_site(empty)
    res = CliRunner().invoke(main, ["model", str(empty / "site.toml")])
    assert res.exit_code == 2
    assert res.output.strip().endswith(
        "site.toml: no readings in the database yet (run 'perfcheck ingest' first)")


def test_fetch_shared_equals_duckdb_df():
    # The pieces must give what DuckDB's own .df() gives (the reference: DuckDB's conversion),
    # also where a whole piece of a column is NULL (DuckDB then hands over objects) and where
    # an integer column has NULLs in the last pieces only.
    con = duckdb.connect()
    query = ("SELECT i, CASE WHEN i >= 40000 THEN 'INV' || (i % 3) END AS inverter_id, "
             "CASE WHEN i < 70000 THEN i / 7 END AS x, CASE WHEN i < 70000 THEN i END AS k, "
             "NULL::VARCHAR AS flags, "
             "CASE WHEN i % 5 = 0 THEN 'sensor' END AS poa_source FROM range(80000) t(i)")
    expected = con.execute(query).df()
    got = align.fetch_shared(con.execute(query), 80000)
    pd.testing.assert_frame_equal(got, expected)
    ids = got["inverter_id"].dropna().to_numpy(dtype=object)
    assert len({id(v) for v in ids}) == 3  # one string object per distinct value
    assert align.fetch_shared(con.execute(query + " WHERE i < 0"), 0).empty
