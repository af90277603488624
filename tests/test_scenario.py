"""The demo scenario generator: determinism, size, truth file, logger habits, physics checks."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest
from numpy.testing import assert_allclose

from perfcheck import scenario
from perfcheck.scenario.logs import MAIN_HEADER
from perfcheck.site import load_site

EVENT_KINDS = {
    # the event kinds of the detectors, plus the data faults the generator also injects
    "outage", "partial_outage", "clipping", "curtailment", "soiling", "shading",
    "degradation", "sensor_fault", "clock_fault", "data_gap", "corrupt_rows", "tracker_stall",
    "wind_stow",
}
MB = 1_000_000


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def full(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The default demo, regenerated from scratch."""
    return scenario.generate(tmp_path_factory.mktemp("demo"))


@pytest.fixture(scope="module")
def truth(full: Path) -> dict:
    return json.loads((full / "truth.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def daily(full: Path) -> pd.DataFrame:
    return pd.read_csv(full / "truth_daily.csv", dtype={"date": str, "inverter_id": str})


def test_regenerated_demo_equals_shipped_demo_byte_for_byte(full: Path) -> None:
    shipped = scenario.demo_dir()
    for path in sorted(full.iterdir()):
        assert (shipped / path.name).is_file(), f"{path.name} missing from {shipped}"
        assert _sha(shipped / path.name) == _sha(path), f"{path.name} differs"
    extra = {p.name for p in shipped.glob("talbrunn_*.csv")} - {p.name for p in full.iterdir()}
    assert not extra, f"stale files in {shipped}: {sorted(extra)}"


def test_shipped_demo_is_under_20_mb(full: Path) -> None:
    shipped = scenario.demo_dir()
    total = sum((shipped / p.name).stat().st_size for p in full.iterdir())
    assert total < 20 * MB, f"demo_logs holds {total / MB:.1f} MB"


def test_same_arguments_same_bytes_other_seed_other_bytes(tmp_path: Path) -> None:
    a = scenario.generate(tmp_path / "a", start="2025-06-20", days=2)
    b = scenario.generate(tmp_path / "b", start="2025-06-20", days=2)
    c = scenario.generate(tmp_path / "c", start="2025-06-20", days=2, seed=7)
    names = sorted(p.name for p in a.iterdir())
    assert names == sorted(p.name for p in b.iterdir())
    assert all(_sha(a / n) == _sha(b / n) for n in names)
    assert _sha(a / "talbrunn_fl3_2025-06.csv") != _sha(c / "talbrunn_fl3_2025-06.csv")


def test_site_file_loads_and_describes_the_plant(full: Path) -> None:
    site = load_site(full / "site.toml")
    assert site.timezone == "Europe/Vienna"
    assert [i.id for i in site.inverters] == ["inv1", "inv2", "inv3", "inv4"]
    assert site.export_limit_kw < site.ac_kw  # export curtailment is possible
    assert max(i.dc_kwp / i.ac_kw for i in site.inverters) > 1.25  # one inverter clips
    assert len({a.azimuth_deg for i in site.inverters for a in i.arrays}) >= 3
    assert site.inverters[0].arrays[0].horizon  # the site horizon reaches every array
    # every key of the example is explained: on its first line or in the comment just above
    lines = (full / "site.toml").read_text(encoding="utf-8").splitlines()
    explained, seen = set(), set()
    for before, line in zip(["", *lines], lines, strict=False):
        m = re.match(r"\s*#?\s*(\w+) = ", line)
        if m:
            seen.add(m[1])
            if "#" in line.split("=", 1)[1] or before.lstrip().startswith("#"):
                explained.add(m[1])
    assert seen - explained == set()
    assert len(seen) > 50


def test_truth_entries_follow_the_schema(truth: dict, full: Path) -> None:
    site = load_site(full / "site.toml")
    scopes = {"plant"} | {f"inverter:{i.id}" for i in site.inverters}
    t0 = dt.datetime.fromisoformat(truth["scenario"]["start"])
    t1 = dt.datetime.fromisoformat(truth["scenario"]["end"])
    kinds = set()
    for f in truth["faults"] + truth["logger_habits"]:
        assert set(f) >= {"kind", "scope", "start", "end", "energy_loss_kwh", "parameters"}
        assert f["kind"] in EVENT_KINDS | set(scenario.LOGGER_HABITS)
        assert f["scope"] in scopes
        start, end = dt.datetime.fromisoformat(f["start"]), dt.datetime.fromisoformat(f["end"])
        assert start.tzinfo is not None and end.tzinfo is not None
        assert t0 <= start <= end <= t1
        assert f["energy_loss_kwh"] >= 0
        kinds.add(f["kind"])
    assert kinds == EVENT_KINDS | set(scenario.LOGGER_HABITS)
    assert {f["kind"] for f in truth["faults"]} == EVENT_KINDS
    assert truth["attribution"]["order"] == list(scenario.ATTRIBUTION_ORDER)


def test_daily_losses_add_up_to_clean_minus_faulted(daily: pd.DataFrame, truth: dict) -> None:
    loss_cols = [f"loss_{k}_kwh" for k in scenario.ATTRIBUTION_ORDER]
    # rounding: each daily value is written with 4 decimals
    assert_allclose(daily["clean_energy_kwh"] - daily["energy_kwh"],
                    daily[loss_cols].sum(axis=1), atol=5e-4)
    assert_allclose(daily["clean_energy_kwh"].sum(), truth["totals"]["clean_energy_kwh"],
                    atol=0.5)
    assert len(daily) == 730 * 4 and daily.groupby("date").size().eq(4).all()


def test_each_fault_energy_is_its_daily_loss_over_its_window(
    daily: pd.DataFrame, truth: dict
) -> None:
    checked = 0
    for f in truth["faults"]:
        if f["kind"] not in scenario.ATTRIBUTION_ORDER or f.get("design"):
            continue
        d0 = dt.datetime.fromisoformat(f["start"]).date().isoformat()
        d1 = dt.datetime.fromisoformat(f["end"]).date().isoformat()
        rows = daily[(daily["date"] >= d0) & (daily["date"] <= d1)]
        if f["scope"] != "plant":
            rows = rows[rows["inverter_id"] == f["scope"].split(":")[1]]
        # rounding of daily values (4 decimals) bounds the difference
        assert_allclose(rows[f"loss_{f['kind']}_kwh"].sum(), f["energy_loss_kwh"],
                        atol=1e-4 * len(rows) + 1e-3, err_msg=f"{f['kind']} {f['start']}")
        checked += 1
    assert checked >= 10
    for kind in scenario.ATTRIBUTION_ORDER:  # no loss outside the listed windows
        listed = sum(f["energy_loss_kwh"] for f in truth["faults"]
                     if f["kind"] == kind and not f.get("design"))
        assert_allclose(daily[f"loss_{kind}_kwh"].sum(), listed, atol=0.5, err_msg=kind)


def test_design_clipping_is_the_unlimited_minus_limited_energy(
    daily: pd.DataFrame, truth: dict
) -> None:
    # the wind stow is design too, but lies in the plane of the rows, not at the AC limits
    design = sum(f["energy_loss_kwh"] for f in truth["faults"]
                 if f.get("design") and f["kind"] != "wind_stow")
    unlimited_minus_clean = (daily["potential_energy_kwh"] - daily["clean_energy_kwh"]).sum()
    assert_allclose(unlimited_minus_clean, design, atol=1.0)
    assert any(f["kind"] == "clipping" and f["scope"] == "inverter:inv1" for f in truth["faults"])


def test_fault_free_variant_has_no_injected_fault(tmp_path: Path) -> None:
    out = scenario.generate(tmp_path, start="2025-06-05", days=5, faults=False)
    t = json.loads((out / "truth.json").read_text(encoding="utf-8"))
    assert all(f.get("design") for f in t["faults"])
    d = pd.read_csv(out / "truth_daily.csv")
    assert_allclose(d["clean_energy_kwh"], d["energy_kwh"], atol=0)
    # same weather as the faulted demo: the weather station files agree line for line
    faulty = scenario.generate(tmp_path / "f", start="2025-06-05", days=5)
    assert (out / "talbrunn_ws2_2025-06.csv").read_bytes() == \
        (faulty / "talbrunn_ws2_2025-06.csv").read_bytes()


def test_pure_noise_variant_scatters_around_the_clean_plant(tmp_path: Path) -> None:
    out = scenario.generate(tmp_path, start="2025-06-05", days=3, pure_noise=True)
    t = json.loads((out / "truth.json").read_text(encoding="utf-8"))
    assert t["scenario"]["pure_noise"] and all(f.get("design") for f in t["faults"])


@pytest.mark.parametrize(("interval", "station"), [(1, 10), (15, 15)])
def test_other_logger_intervals(tmp_path: Path, interval: int, station: int) -> None:
    out = scenario.generate(tmp_path, start="2025-06-05", days=1, interval_min=interval)
    site = load_site(out / "site.toml")
    assert [lg.interval_min for lg in site.loggers] == [interval, station]
    rows = (out / "talbrunn_ws2_2025-06.csv").read_text(encoding="utf-8").splitlines()[1:]
    assert len(rows) == 24 * 60 // station


def _labels(path: Path) -> list[str]:
    lines = path.read_bytes().decode("utf-8-sig").split("\r\n")
    return [ln.split(";")[0] for ln in lines[5:] if ln]


def test_main_logger_habits(full: Path) -> None:
    raw = (full / "talbrunn_fl3_2024-10.csv").read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf") and b"\r\n" in raw and b"\n" not in raw.replace(
        b"\r\n", b"")
    text = raw.decode("utf-8-sig").split("\r\n")
    assert text[3].startswith("Zeit;P_WR1") and text[4].startswith(";kW")
    # first row: the interval 00:00-00:05 labelled by its end; the month's last row 24:00
    labels = _labels(full / "talbrunn_fl3_2024-10.csv")
    assert labels[0] == "01.10.2024 00:05" and labels[-1] == "01.11.2024 00:00"


def test_dst_changeovers_as_a_local_clock_logger_writes_them(full: Path) -> None:
    # EU Directive 2000/84/EC: summer time ends at 01:00 UTC on the last Sunday of October
    # (27 Oct 2024) and starts at 01:00 UTC on the last Sunday of March (30 Mar 2025).
    october = _labels(full / "talbrunn_fl3_2024-10.csv")
    repeated = [f"27.10.2024 02:{m:02d}" for m in range(0, 60, 5)]
    assert all(october.count(x) == 2 for x in repeated)
    first, second = (i for i, x in enumerate(october) if x == "27.10.2024 02:00")
    assert october[first:first + 12] == repeated == october[second:second + 12]
    assert second - first == 12  # written in order: the hour, then the hour again
    march = _labels(full / "talbrunn_fl3_2025-03.csv")
    assert not any(x.startswith("30.03.2025 02:") for x in march)
    i = march.index("30.03.2025 01:55")
    assert march[i + 1] == "30.03.2025 03:00"
    ws = (full / "talbrunn_ws2_2024-10.csv").read_text(encoding="utf-8").splitlines()
    assert "2024-10-27T02:00:00+02:00" in "\n".join(ws) and "2024-10-27T02:00:00+01:00" in \
        "\n".join(ws)


def test_reexport_repeats_rows_of_the_monthly_file(full: Path) -> None:
    again = _labels(full / "talbrunn_fl3_2025-03-10_reexport.csv")
    lines = set((full / "talbrunn_fl3_2025-03.csv").read_bytes().decode("utf-8-sig").split("\r\n"))
    body = (full / "talbrunn_fl3_2025-03-10_reexport.csv").read_bytes().decode(
        "utf-8-sig").split("\r\n")[5:]
    assert len(again) == 7 * 288 and all(ln in lines for ln in body if ln)


def test_sentinel_counts_match_the_files(full: Path, truth: dict) -> None:
    counts = {h["parameters"]["logger"]: h["parameters"]["count"]
              for h in truth["logger_habits"] if h["kind"] == "sentinels"}
    main = "".join(p.read_bytes().decode("utf-8-sig")
                   for p in sorted(full.glob("talbrunn_fl3_20??-??.csv")))
    assert counts["fl3"] == {"-9999": main.count(";-9999"), "#N/A": main.count(";#N/A")}
    assert min(counts["fl3"].values()) > 10
    ws = "".join(p.read_text(encoding="utf-8") for p in full.glob("talbrunn_ws2_*.csv"))
    assert counts["ws2"] == {"NaN": ws.count(",NaN")}


def test_corrupt_rows_are_where_the_truth_says(full: Path, truth: dict) -> None:
    entry = next(f for f in truth["faults"] if f["kind"] == "corrupt_rows")
    for row in entry["parameters"]["rows"]:
        line = (full / row["file"]).read_bytes().decode("utf-8-sig").split("\r\n")[
            row["line"] - 1]
        fields = line.split(";")
        assert len(fields) != len(MAIN_HEADER.split("\r\n")[0].split(";")) or any(
            "E#" in x for x in fields), row


# ---------------------------------------------------------------------------------------------
# physics against outside sources


def test_part_load_efficiency_matches_dobos_2014() -> None:
    # Dobos 2014 (NREL/TP-6A20-62641) part-load curve, eta_nom 0.96, eta_ref 0.9637; the values
    # are derived from the published formula (REFERENCES.md, D): zeta 1 -> 0.9600,
    # 0.5 -> 0.96219, 0.1 -> 0.92163. Tolerance 5e-6: the published figures have 5 decimals.
    pdc0 = 1000.0
    zeta = np.array([1.0, 0.5, 0.1])
    eta = scenario.dobos_ac(zeta * pdc0, pdc0, 0.96) / (zeta * pdc0)
    assert_allclose(eta, [0.9600, 0.96219, 0.92163], atol=5e-6)
    # and pvlib's implementation of the same equation, below the AC limit
    pdc = np.linspace(1.0, 990.0, 50)
    assert_allclose(scenario.dobos_ac(pdc, pdc0, 0.96),
                    pvlib.inverter.pvwatts(pdc, pdc0, 0.96), rtol=1e-12)


def _june_weather() -> tuple[scenario.Weather, pd.DatetimeIndex, object]:
    site = load_site(scenario.demo_dir() / "site.toml")
    times = pd.date_range("2025-06-21", periods=288, freq="5min", tz=site.tz).tz_convert("UTC")
    w = scenario.make_weather(site, times, 5, np.random.default_rng(1))
    return w, times, site


def test_clear_sky_ghi_matches_the_ineichen_perez_closed_form() -> None:
    # Ineichen & Perez 2002, Solar Energy 73(3):151 (REFERENCES.md, C):
    # GHI = cg1 I0 cos z exp(-cg2 AM (fh1 + fh2 (TL - 1))), cg1 = 5.09e-5 h + 0.868,
    # cg2 = 3.92e-5 h + 0.0387, fh1 = exp(-h/8000), fh2 = exp(-h/1250). The inputs AM, TL and
    # I0 are the generator's own; the formula is written out here independently.
    w, times, site = _june_weather()
    h = site.altitude_m
    zen = w.solpos["apparent_zenith"].to_numpy()
    day = zen < 80
    am = pvlib.atmosphere.get_relative_airmass(zen) * pvlib.atmosphere.alt2pres(h) / 101325
    mid = times + pd.Timedelta(minutes=2.5)
    tl = pvlib.clearsky.lookup_linke_turbidity(mid, site.latitude_deg,
                                               site.longitude_deg).to_numpy()
    cg1, cg2 = 5.09e-5 * h + 0.868, 3.92e-5 * h + 0.0387
    fh1, fh2 = np.exp(-h / 8000), np.exp(-h / 1250)
    ghi = cg1 * w.dni_extra * np.cos(np.radians(zen)) * np.exp(
        -cg2 * am * (fh1 + fh2 * (tl - 1)))
    assert_allclose(w.ghi_clear[day], ghi[day], rtol=1e-9)
    # the REFERENCES.md derived check value: h 0, AM 1, TL 3, I0 1364 -> 1054.17 W/m^2
    assert_allclose(0.868 * 1364 * np.exp(-0.0387 * (1 + 2)), 1054.17, atol=0.01)


def test_irradiance_components_close_and_stay_physical() -> None:
    w, _, _ = _june_weather()
    cosz = np.clip(np.cos(np.radians(w.solpos["zenith"].to_numpy())), 0, None)
    # closure GHI = DHI + DNI cos z (definition of the components)
    assert_allclose(w.ghi, w.dhi + w.dni * cosz, atol=1e-9)
    assert (w.dni <= w.dni_clear * 1.05 + 1e-9).all() and (w.dhi >= 0).all()
    assert (w.rain >= 0).all() and (w.wind_speed >= 0).all()
    # clear-sky index of an interval mean stays within what is observed at 5 minutes
    # (cloud enhancement up to about 1.3-1.5 is reported; ours caps at 1.08, common practice)
    day = w.ghi_clear > 50
    assert (w.ghi[day] / w.ghi_clear[day]).max() < 1.1


def test_annual_figures_are_plausible_for_lower_austria(truth: dict, daily: pd.DataFrame) -> None:
    # Annual GHI in eastern Austria is about 1100-1300 kWh/m^2 (from memory, European solar
    # atlases); specific yield of healthy plants there about 950-1250 kWh/kWp (common practice).
    site = load_site(scenario.demo_dir() / "site.toml")
    years = 2.0
    specific = daily["clean_energy_kwh"].sum() / site.dc_kwp / years
    assert 950 < specific < 1250
    types = pd.Series(truth["day_types"])
    assert set(types) == set(scenario.DAY_TYPES)


def test_command_line_usage_error() -> None:
    assert scenario.main([]) == 2


# ---------------------------------------------------------------------------------------------
# the horizon's sky view and the diffuse pyranometer

UNIFORM_10 = ((0.0, 10.0), (180.0, 10.0))  # a horizon 10 degrees high all round


def test_sky_view_of_a_uniform_horizon_matches_the_view_factor_integral() -> None:
    # Derived (D) from the isotropic view-factor integral of an obstructed sky dome (Duffie &
    # Beckman 2013, sections 2.16 and 3.8, from memory): a horizon of elevation h all round
    # leaves a horizontal plane cos^2 h of its view (1 - sin^2 h) and a vertical plane
    # 1 - (2h + sin 2h)/pi. Tolerance 1e-9: the elevation integral is closed form and the
    # integrand is constant in azimuth for the horizontal plane, a cosine for the vertical.
    h = np.radians(10.0)
    assert_allclose(scenario.plant.sky_view_ratio(0.0, 180.0, UNIFORM_10), np.cos(h) ** 2,
                    rtol=1e-9)
    assert_allclose(scenario.plant.sky_view_ratio(90.0, 180.0, UNIFORM_10),
                    1 - (2 * h + np.sin(2 * h)) / np.pi, rtol=1e-9)
    # a flat horizon hides nothing; one above Perez's 6.5-degree band hides all of that band
    assert scenario.plant.sky_view_ratio(25.0, 180.0, ()) == 1.0
    assert_allclose(scenario.plant.sky_view_ratio(25.0, 180.0, UNIFORM_10,
                                                  scenario.plant.PEREZ_BAND_DEG), 0.0,
                    atol=1e-12)
    # an obstruction behind a plane, lower than the plane's own edge, is not seen: tilt 30 deg
    # facing south sees the northern sky only above 30 deg elevation (cos theta = 0 there)
    behind = ((0.0, 10.0), (20.0, 10.0), (25.0, 0.0), (335.0, 0.0), (340.0, 10.0))
    assert_allclose(scenario.plant.sky_view_ratio(30.0, 180.0, behind), 1.0, atol=1e-12)


def test_horizon_takes_its_share_of_the_isotropic_diffuse_only() -> None:
    # Perez et al. 1990 on a horizontal plane: horizon band term F2 sin(0) = 0, so the horizon
    # (beam left visible) removes exactly sin^2 h of the isotropic part (view-factor integral,
    # D, as above). Tolerance 1e-9 W/m^2.
    w, _, _ = _june_weather()
    visible = np.ones(len(w.ghi))
    open_sky, _ = scenario.plant.array_irradiance(w, 0.0, 180.0, 0.2, visible)
    walled, _ = scenario.plant.array_irradiance(w, 0.0, 180.0, 0.2, visible, UNIFORM_10)
    zen, saz = w.solpos["apparent_zenith"].to_numpy(), w.solpos["azimuth"].to_numpy()
    iso = np.nan_to_num(np.asarray(pvlib.irradiance.perez(
        0.0, 180.0, w.dhi, w.dni, w.dni_extra, zen, saz, w.airmass,
        return_components=True)["poa_isotropic"], dtype=float))
    assert_allclose(open_sky - walled, iso * np.sin(np.radians(10.0)) ** 2, atol=1e-9)
    assert (open_sky - walled).max() > 1.0


def test_weather_station_logs_diffuse_horizontal_irradiance(full: Path, truth: dict) -> None:
    site = load_site(full / "site.toml")
    ws = next(lg for lg in site.loggers if lg.name == "ws2")
    assert "dhi" in {c.quantity for c in ws.columns}
    frames = [pd.read_csv(p, na_values=["NaN"]) for p in sorted(full.glob("talbrunn_ws2_*.csv"))]
    df = pd.concat(frames)
    df["date"] = df["time"].str[:10]
    day = df[df["ghi"] > 50]
    # DHI is part of GHI (closure GHI = DNI cos z + DHI); allow both sensors' noise
    assert not (day["dhi"] > day["ghi"] * 1.03 + 2.0).any()
    # overcast days (the sun disc out for at most a tenth of the time, generator's day types):
    # most of GHI is diffuse; clear days: mostly beam
    types = pd.Series(truth["day_types"])
    overcast = day[day["date"].map(types) == "overcast"]
    clear = day[day["date"].map(types) == "clear"]
    assert (overcast["dhi"].sum() / overcast["ghi"].sum()) > 0.8
    assert (clear["dhi"].sum() / clear["ghi"].sum()) < 0.3
    # sentinels: the wind and DHI columns both write NaN, counted per column in the truth
    counts = next(h["parameters"] for h in truth["logger_habits"]
                  if h["kind"] == "sentinels" and h["parameters"]["logger"] == "ws2")
    assert counts["columns"] == {"wind": int(df["wind"].isna().sum()),
                                 "dhi": int(df["dhi"].isna().sum())}
    assert min(counts["columns"].values()) > 5


# ---------------------------------------------------------------------------------------------
# the tracker block (inv4: horizontal single-axis trackers, bifacial modules)


def _main_column(out: Path, month: str, column: str, tz: str) -> pd.Series:
    """One column of the main logger's file of ``month`` on UTC interval starts (a month
    without a summer-time change: the labels are unambiguous)."""
    df = pd.read_csv(out / f"talbrunn_fl3_{month}.csv", sep=";", decimal=",", skiprows=[0, 1, 2, 4],
                     encoding="utf-8-sig")
    end = pd.to_datetime(df["Zeit"], format="%d.%m.%Y %H:%M").dt.tz_localize(tz)
    return pd.Series(df[column].to_numpy(dtype=float),
                     index=(end - pd.Timedelta(minutes=5)).dt.tz_convert("UTC"))


def test_tracker_rows_turn_stall_and_stow_as_the_truth_says(tmp_path: Path) -> None:
    # The rows turn as pvlib's single-axis tracking with backtracking (Marion & Dobos 2013,
    # NREL/TP-6A20-58891; Lorenzo et al. 2011) turns them; the inclinometer scatters 0.2 deg,
    # so 1 deg is five of its standard deviations. Inside the stall the rows hold the truth's
    # angle; in the stow of the 18 March 2026 gale they lie flat.
    out = scenario.generate(tmp_path / "stall", start="2025-06-14", days=12)
    site = load_site(out / "site.toml")
    arr = site.inverter("inv4").arrays[0]
    t = arr.tracker
    angle = _main_column(out, "2025-06", "Winkel_NF4", site.timezone)
    sun = pvlib.solarposition.get_solarposition(angle.index + pd.Timedelta(minutes=2.5),
                                                site.latitude_deg, site.longitude_deg,
                                                site.altitude_m)
    design = pvlib.tracking.singleaxis(sun["apparent_zenith"], sun["azimuth"], t.axis_tilt_deg,
                                       t.axis_azimuth_deg, t.max_angle_deg, t.backtrack,
                                       arr.gcr)["tracker_theta"].fillna(0.0).to_numpy()
    truth = json.loads((out / "truth.json").read_text(encoding="utf-8"))
    (stall,) = [f for f in truth["faults"] if f["kind"] == "tracker_stall"]
    assert stall["scope"] == "inverter:inv4" and stall["energy_loss_kwh"] > 100
    held = (angle.index >= pd.Timestamp(stall["start"])) & (angle.index < pd.Timestamp(
        stall["end"]))
    assert_allclose(angle[held], stall["parameters"]["angle_deg"], atol=1.0)
    assert_allclose(angle[~held], design[~held], atol=1.0)
    gale = scenario.generate(tmp_path / "gale", start="2026-03-17", days=3)
    truth = json.loads((gale / "truth.json").read_text(encoding="utf-8"))
    stows = [f for f in truth["faults"] if f["kind"] == "wind_stow"]
    assert stows and all(f["design"] and f["energy_loss_kwh"] > 0 for f in stows)
    angle = _main_column(gale, "2026-03", "Winkel_NF4", site.timezone)
    for f in stows:
        inside = angle[pd.Timestamp(f["start"]):pd.Timestamp(f["end"]) - pd.Timedelta(
            minutes=5)]
        flat = inside[inside.abs() <= 1.0]  # stowed; between the stowed blocks the rows track
        assert len(flat) >= f["parameters"]["intervals"]


def test_tracker_block_yields_more_than_the_fixed_south_array(daily: pd.DataFrame) -> None:
    # A horizontal single-axis tracker collects some 15-25 % more than a fixed plane near the
    # optimal tilt at mid latitudes, and bifacial modules add some 5-10 % on trackers (common
    # practice, from memory): the clean specific yield of inv4 over that of inv1 (66 kWp
    # south at 25 deg) between 1.10 and 1.45.
    site = load_site(scenario.demo_dir() / "site.toml")
    kwh = daily.groupby("inverter_id")["clean_energy_kwh"].sum()
    ratio = (kwh["inv4"] / site.inverter("inv4").dc_kwp) / (kwh["inv1"] / site.inverter(
        "inv1").dc_kwp)
    assert 1.10 < ratio < 1.45
