"""The unit check and the site file's corrections (issue 10, item 1).

The plant and its files are invented: one 50 kW inverter on 60 kWp, two exports of ten
clear days each at 15 minutes with AC power, interval energy and plane-of-array irradiance.
The second export writes AC power in kW under a units row saying W (the issue's case:
``48.857`` beside ``12226`` Wh per 15 minutes), the truth stated here being that the
inverter ran normally all along.
"""

from __future__ import annotations

import json
import math
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest
from click.testing import CliRunner

from perfcheck import analysis, db, pipeline, units
from perfcheck.cli import main
from perfcheck.errors import SiteFileError
from perfcheck.site import load_site

SITE = """\
[site]
name = "Hollowmere test field"
latitude_deg = 48.0
longitude_deg = 11.0
altitude_m = 500
timezone = "Europe/Berlin"
commissioned = 2023-05-01

[[inverters]]
id = "INV1"
ac_kw = 50
[[inverters.arrays]]
dc_kwp = 60
tilt_deg = 30
azimuth_deg = 180
gamma_pct_per_c = -0.37
strings = 10

[[loggers]]
name = "inv"
match = "inv1_*.csv"
interval_min = 15
units_row = true
[loggers.time]
columns = ["ts"]
kind = "iso"
[[loggers.columns]]
name = "P_AC"
quantity = "ac_power"
unit = "W"
inverter = "INV1"
[[loggers.columns]]
name = "E_AC"
quantity = "energy_interval"
unit = "Wh"
inverter = "INV1"
[[loggers.columns]]
name = "G_POA"
quantity = "poa"
unit = "W/m2"
[[loggers.columns]]
name = "T_AMB"
quantity = "temp_air"
unit = "C"
"""


def _export(start: str, days: int, power_scale: float, stopped: bool = False) -> str:
    """An invented export: clear-sky plane-of-array irradiance (Ineichen through pvlib's
    Location), power 0.8 x irradiance x 60 kWp / 1000 capped at the 50 kW rating, the
    interval energy power x 0.25 h, air at 20 C; power written times ``power_scale``. A
    ``stopped`` inverter writes noise of 0 to 5 W and no energy."""
    times = pd.date_range(start, periods=days * 96, freq="15min", tz="UTC")
    loc = pvlib.location.Location(48.0, 11.0, altitude=500)
    mid = times + pd.Timedelta("7.5min")
    cs = loc.get_clearsky(mid)
    sun = loc.get_solarposition(mid)
    poa = pvlib.irradiance.get_total_irradiance(30, 180, sun["apparent_zenith"],
                                                sun["azimuth"], cs["dni"], cs["ghi"],
                                                cs["dhi"])["poa_global"].fillna(0).to_numpy()
    power = np.minimum(0.8 * poa * 60.0, 50_000.0)
    if stopped:
        power = np.random.default_rng(1).uniform(0.0, 5.0, len(times))
    lines = ["ts,P_AC,E_AC,G_POA,T_AMB", ",W,Wh,W/m2,°C"]
    for t, p, g in zip(times, power, poa, strict=True):
        lines.append(f"{t.isoformat()},{p * power_scale:.3f},{p * 0.25:.0f},{g:.1f},20")
    return "\n".join(lines) + "\n"


def _plant(tmp_path: Path, corrections: str = "", stopped: bool = False) -> tuple:
    (tmp_path / "site.toml").write_text(SITE + corrections)
    good, bad = tmp_path / "inv1_2024-06a.csv", tmp_path / "inv1_2024-06b.csv"
    good.write_text(_export("2024-06-01", 10, 1.0))
    # kW under a units row saying W, or (stopped) an inverter that really stopped
    bad.write_text(_export("2024-06-11", 10, 1e-3 if not stopped else 1.0, stopped))
    site = load_site(tmp_path / "site.toml")
    return site, db.connect(tmp_path / "site.duckdb"), [good, bad]


def test_power_in_kw_under_w_is_a_finding_not_an_outage(tmp_path):
    site, con, files = _plant(tmp_path)
    pipeline.update(con, site, files)
    found = con.execute("SELECT file_id, column_name, factor, reference FROM unit_findings"
                        ).fetchall()
    assert found == [(2, "P_AC", 1000.0, "energy")]
    # the file's power is left out of readings; its energy and irradiance stay
    assert con.execute("SELECT quantity, count(*) FROM readings WHERE file_id = 2 "
                       "GROUP BY ALL ORDER BY 1").fetchall() == [
        ("energy_interval_wh", 960), ("poa_wm2", 960), ("temp_air_c", 960)]
    doc = pipeline.view(con, site, pd.Timestamp("2024-06-01", tz="UTC"),
                        pd.Timestamp("2024-06-21", tz="UTC"))
    # the truth: the inverter ran all along; the measured power comes from the energy column
    assert [e for e in doc["events"] if "outage" in e["kind"]] == []
    (finding,) = doc["data_quality"]["suspected_unit_errors"]
    assert (finding["file"], finding["column"], finding["factor"]) == (
        files[1].name, "P_AC", 1000.0)
    assert doc["metrics"]["period"]["availability"] == 1.0


def test_a_stopped_inverter_is_an_outage_not_a_unit_error(tmp_path):
    # the truth here: the inverter stopped on 2024-06-11 (noise of a few W, no energy)
    site, con, files = _plant(tmp_path, stopped=True)
    pipeline.update(con, site, files)
    assert con.execute("SELECT count(*) FROM unit_findings").fetchone() == (0,)
    doc = pipeline.view(con, site, pd.Timestamp("2024-06-01", tz="UTC"),
                        pd.Timestamp("2024-06-21", tz="UTC"))
    assert [e["kind"] for e in doc["events"] if "outage" in e["kind"]] == ["outage"]


def test_a_correction_settles_the_finding_and_is_recorded(tmp_path):
    fix = ('\n[[corrections]]\nfiles = "inv1_2024-06b.csv"\ncolumn = "P_AC"\nunit = "kW"\n'
           'reason = "export written in kW under a W units row (checked against the meter)"\n')
    site, con, files = _plant(tmp_path, fix)
    pipeline.update(con, site, files)
    assert con.execute("SELECT count(*) FROM unit_findings").fetchone() == (0,)
    assert con.execute("SELECT file_id, column_name, factor, rule FROM unit_corrections"
                       ).fetchall() == [(2, "P_AC", 1000.0, "corrections[0] (files "
                                         "'inv1_2024-06b.csv')")]
    # the stored values are kept as read; readings show them x 1000 (kW to W, SI prefix k)
    raw = con.execute("SELECT max(value) FROM channel_values v JOIN channels USING "
                      "(channel_id) WHERE file_id = 2 AND quantity = 'ac_power_w'").fetchone()[0]
    seen = con.execute("SELECT max(value) FROM readings WHERE file_id = 2 "
                       "AND quantity = 'ac_power_w'").fetchone()[0]
    assert math.isclose(seen, raw * 1000.0, rel_tol=1e-12)
    doc = pipeline.view(con, site, pd.Timestamp("2024-06-01", tz="UTC"),
                        pd.Timestamp("2024-06-21", tz="UTC"))
    assert doc["data_quality"]["unit_corrections"][0]["reason"].startswith("export written")


def test_a_correction_added_later_recomputes(tmp_path):
    site, con, files = _plant(tmp_path)
    pipeline.update(con, site, files)
    first = analysis.current(con).input_hash
    (tmp_path / "site.toml").write_text(SITE + '\n[[corrections]]\nfiles = "*06b*"\n'
                                        'column = "P_AC"\nfactor = 1000\nreason = "kW"\n')
    site = load_site(tmp_path / "site.toml")
    assert not units.current(con, site)
    pipeline.update(con, site, [])
    assert units.current(con, site)
    assert con.execute("SELECT count(*) FROM unit_findings").fetchone() == (0,)
    assert analysis.current(con).input_hash != first
    measured = con.execute("SELECT max(measured_ac_w) FROM aligned WHERE ts >= "
                           "'2024-06-11'").fetchone()[0]
    assert measured > 40_000  # the corrected kW values, in W


def test_two_equally_specific_corrections_are_an_error(tmp_path):
    fix = ''.join(f'\n[[corrections]]\nfiles = "{g}"\ncolumn = "P_AC"\nfactor = 1000\n'
                  'reason = "kW"\n' for g in ("inv1_*b.csv", "inv1_2*.csv"))
    site, con, files = _plant(tmp_path, fix)
    with pytest.raises(SiteFileError) as err:
        pipeline.update(con, site, files)
    assert str(err.value) == (
        f"{site.path}: corrections[0] (files 'inv1_*b.csv') and corrections[1] (files "
        f"'inv1_2*.csv') both correct column 'P_AC' of {files[1]} equally specifically; make "
        "one files glob more specific")


@pytest.mark.parametrize("body, message", [
    ('column = "P"\nfactor = 2\nreason = "x"', "corrections[0].column: 'P' is not a measured "
     "column of any [[loggers]] entry (status codes have no unit)"),
    ('column = "P_AC"\nreason = "x"', "corrections[0].factor: give either factor"),
    ('column = "P_AC"\nunit = "K"\nreason = "x"', "corrections[0].unit: 'K' is not one of"),
    ('column = "P_AC"\nfactor = 1000\nreason = " "', "corrections[0].reason: say why"),
])
def test_corrections_are_validated(tmp_path, body, message):
    (tmp_path / "site.toml").write_text(SITE + f'\n[[corrections]]\nfiles = "*"\n{body}\n')
    with pytest.raises(SiteFileError) as err:
        units.load_corrections(load_site(tmp_path / "site.toml"))
    assert str(err.value).startswith(f"{tmp_path / 'site.toml'}: {message}")


# --------------------------------------------------------------------------------------------
# the statistic, on stated numbers


def test_clean_factor():
    # kW read as W: power x interval / energy = 1/1000 (SI prefix k, BIPM SI Brochure 2019)
    assert units.clean_factor(1000 * 1.05, units.CLEAN_FACTORS, 1.2) == 1000
    assert units.clean_factor(1 / 1000, units.CLEAN_FACTORS, 1.2) == 1e-3
    # 1 kWh = 3.6 MJ (BIPM SI Brochure 2019, Table 8); a correct pair sits near 1
    assert units.clean_factor(3.6, units.CLEAN_FACTORS, 1.2) == 3.6
    assert units.clean_factor(1.1, units.CLEAN_FACTORS, 1.2) is None
    assert units.clean_factor(2.0, units.CLEAN_FACTORS, 1.2) is None


def test_rating_test_needs_a_level_a_prefix_off_and_the_sun():
    sunny = {"p99": 48.9, "n_day": 500, "sun_corr": 0.9}
    # 48.9 "W" on a 50 kW inverter: 1000 too low
    assert units.decide(sunny, None, [], True, 50_000.0, 15)[:2] == (1000.0, "rating")
    # a stopped inverter's noise does not follow the sun: not a unit error (an outage)
    assert units.decide({**sunny, "sun_corr": 0.05}, None, [], True, 50_000.0, 15) is None
    # a dark winter month at a fifth of the rating is plausible: no finding
    assert units.decide({**sunny, "p99": 10_000.0}, None, [], True, 50_000.0, 15) is None
    # values 1000 too high (W under kW): level / rating = 1000 x 0.98
    assert units.decide({**sunny, "p99": 4.9e7}, None, [], True, 50_000.0, 15)[0] == 1e-3


def test_energy_pair_decides_and_a_steady_ratio_is_needed():
    level = {"p99": 4.9e4, "n_day": 500, "sun_corr": 0.9}
    pair = {"n": 400, "q25": 0.95, "q50": 1.0, "q75": 1.05}
    assert units.decide(level, pair, [], True, 50_000.0, 15) is None
    # power written as energy per 15 minutes (Wh) where W is declared: a quarter, factor 4
    quarter = {"n": 400, "q25": 0.24, "q50": 0.25, "q75": 0.26}
    assert units.decide({**level, "p99": 1.2e4}, quarter, [], True, 50_000.0, 15)[:2] == (
        4.0, "energy")
    # a scattered ratio (noise) decides nothing
    noisy = {"n": 400, "q25": 0.05, "q50": 0.25, "q75": 2.0}
    assert units.decide({**level, "p99": 1.2e4}, noisy, [], True, 50_000.0, 15) is None


def test_check_text_report_and_bundle_show_the_finding_and_verify_reruns_it(tmp_path):
    fix = ('\n[[corrections]]\nfiles = "inv1_2024-06a.csv"\ncolumn = "E_AC"\nfactor = 1\n'
           'reason = "energy column checked against the meter (invented)"\n')
    site, con, files = _plant(tmp_path, fix)
    con.close()
    runner = CliRunner()
    db_path = str(tmp_path / "site.duckdb")
    site_path = str(tmp_path / "site.toml")
    for args in (["ingest", site_path, *map(str, files), "--db", db_path],
                 ["model", site_path, "--db", db_path]):
        assert runner.invoke(main, args).exit_code == 0
    out = runner.invoke(main, ["check", site_path, "--db", db_path])
    assert out.exit_code == 0, out.output
    assert (f"Suspected unit error: {files[1].name}, column P_AC: the values look 1000 times too "
            "low (against the same inverter's energy: median ratio to the same inverter's "
            "energy 0.001") in out.stdout
    assert (f"Unit correction: {files[0].name}, column E_AC multiplied by 1 (corrections[0] (files "
            "'inv1_2024-06a.csv')): energy column checked") in out.stdout
    zipped = tmp_path / "claim.zip"
    out = runner.invoke(main, ["evidence", site_path, "--db", db_path, "--from", "2024-06-01",
                               "--to", "2024-06-20", "--out", str(zipped)])
    assert out.exit_code == 0, out.output
    with zipfile.ZipFile(zipped) as z:
        doc = json.loads(z.read("results/check.json"))
    assert [f["column"] for f in doc["data_quality"]["suspected_unit_errors"]] == ["P_AC"]
    ok = runner.invoke(main, ["verify", str(zipped)])
    assert ok.exit_code == 0, ok.output


def test_other_files_of_the_column_are_a_reference():
    low = {"p99": 47.0, "n_day": 900, "sun_corr": 0.7}
    # two healthy months peaking at 45 and 48 kW: this one at 47 "W" is 1000 too low
    assert units.decide(low, None, [45_000.0, 48_000.0], True, 50_000.0, 15)[:2] == (
        1000.0, "other files")
    # a dark month at 1/30 of the rating, a sixth of the others: no finding (season)
    assert units.decide({**low, "p99": 1_600.0}, None, [9_000.0, 10_000.0], True, 50_000.0,
                        15) is None


def test_follows_the_sun_needs_more_than_noise():
    # values unrelated to the sun: correlation ~ N(0, 1/n) (Fisher 1915, large n); 4 standard
    # errors at n = 100 is 0.4, at n = 10 000 the floor of 0.15 applies
    assert not units.follows_the_sun(0.3, 100)
    assert units.follows_the_sun(0.45, 100)
    assert units.follows_the_sun(0.16, 10_000)
    assert not units.follows_the_sun(0.9, 20)  # too few daylight rows
    assert not units.follows_the_sun(None, 1000)
