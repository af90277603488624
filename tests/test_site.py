"""Site-file validation: each mistake gives one line naming the file and key, exit code 2."""

from __future__ import annotations

import datetime as dt
import subprocess
import sys

import pytest
from logger_files import DEFAULT_COLUMNS, logger_toml, run_ingest, write_case

from perfcheck import db
from perfcheck.errors import SiteFileError
from perfcheck.report import report_settings
from perfcheck.site import load_site

GOOD = "ts,P,G\n2024-06-01 10:00,1,100\n"

# Prints the stages and libraries of those named a command really loaded (lazily bound ones do
# not count).
LOADED_STAGES = (
    "import sys\nfrom perfcheck.cli import main\ntry:\n"
    "    main(sys.argv[1:], prog_name='perfcheck')\nexcept SystemExit as exc:\n"
    "    print('exit', exc.code)\n"
    "print(sorted(m for m in ('perfcheck.detect', 'perfcheck.guarantees', 'perfcheck.meter', "
    "'perfcheck.metrics', 'perfcheck.report', 'perfcheck.units', 'perfcheck.model', "
    "'scipy.stats', 'pvlib', 'statsmodels', 'matplotlib', 'pandas') if m in sys.modules "
    "and type(sys.modules[m]).__name__ != '_LazyModule'))")


def _edit(site, old, new):
    text = site.read_text()
    assert old in text, old
    site.write_text(text.replace(old, new, 1))


@pytest.mark.parametrize(
    "old, new, message",
    [
        ("latitude_deg = 48.0\n", "", "site.latitude_deg: missing key (expected a number)"),
        ("latitude_deg = 48.0", 'latitude_deg = "48.0"',
         "site.latitude_deg: expected a number, got str '48.0'"),
        ("latitude_deg = 48.0", "latitude_deg = 48.0\nlatitude = 48.0",
         "site.latitude: unknown key (known keys here: albedo, altitude_m, commissioned, "
         "export_limit_kw, horizon, inbox, latitude_deg, longitude_deg, "
         "module_age_years_at_first_data, name, timezone)"),
        ("latitude_deg = 48.0", "latitude_deg = 98.0",
         "site.latitude_deg: 98.0 is outside the range -90 to 90"),
        ("Europe/Berlin", "Europe/Berlyn",
         "site.timezone: unknown IANA time zone 'Europe/Berlyn' (e.g. 'Europe/Berlin')"),
        ("commissioned = 2023-05-01", 'commissioned = "May 2023"',
         "site.commissioned: expected a date like 2024-03-01, got str 'May 2023'"),
        ("commissioned = 2023-05-01", "commissioned = 2023-05-01\n"
         "module_age_years_at_first_data = 3",
         "site.module_age_years_at_first_data: give either commissioned or "
         "module_age_years_at_first_data, not both"),
        ("commissioned = 2023-05-01", "module_age_years_at_first_data = -1",
         "site.module_age_years_at_first_data: -1.0 is outside the range 0 to 60"),
        ("strings = 2", "strings = 2.5",
         "inverters[0].arrays[0].strings: expected an integer, got float 2.5"),
        ("strings = 2", 'strings = 2\ntechnology = "perovskite"',
         "inverters[0].arrays[0].technology: 'perovskite' is not one of 'mono_si', 'multi_si', "
         "'cdte', 'cigs', 'a_si'"),
        ("strings = 2", "strings = 2\nlow_light_loss_pct = -3",
         "inverters[0].arrays[0].low_light_loss_pct: -3.0 is outside the range 0 to 50"),
        ('unit = "kW"', 'unit = "kV"',
         "loggers[0].columns[0].unit: unit 'kV' not recognised for ac_power (use one of W, kW, "
         "MW)"),
        ('quantity = "poa"', 'quantity = "irradiance"',
         "loggers[0].columns[1].quantity: 'irradiance' is not one of 'ac_power', 'dc_power', "
         "'energy_register', 'energy_interval', 'poa', 'poa_rear', 'ghi', 'dhi', 'dni', "
         "'temp_air', 'temp_module', 'wind_speed', 'rain', 'tracker_angle', 'status'"),
        ('inverter = "INV1"', 'inverter = "INV9"',
         "loggers[0].columns[0].inverter: 'INV9' is not an inverter id of this site "
         "(ids: INV1, INV2, or 'plant')"),
        ('kind = "utc"', 'kind = "UTC"',
         "loggers[0].time.kind: 'UTC' is not one of 'iso', 'utc', 'local', 'epoch'"),
        ("interval_min = 5", "interval_min = 7",
         "loggers[0].interval_min: 7 is not one of 1, 5, 10, 15, 30, 60"),
        ('format = "%Y-%m-%d %H:%M"', 'format = "%Y-%m-%d %Q"',
         "loggers[0].time.format: '%Y-%m-%d %Q' is not a usable format (Failed to parse "
         "format specifier %Y-%m-%d %Q: Unrecognized format for strftime/strptime: %Q)"),
        ("[site]", "[site", "not valid TOML: Expected ']' at the end of a table declaration "
                            "(at line 1, column 6)"),
        # fuzz findings (issue 10): NaN and inf pass a range check (every comparison is false)
        ("latitude_deg = 48.0", "latitude_deg = nan",
         "site.latitude_deg: expected a finite number, got nan"),
        ("ac_kw = 10", "ac_kw = inf", "inverters[0].ac_kw: expected a finite number, got inf"),
        ("ac_kw = 10", "ac_kw = -inf", "inverters[0].ac_kw: expected a finite number, got -inf"),
    ],
)
def test_site_file_errors(tmp_path, old, new, message):
    site, log = write_case(tmp_path, GOOD)
    _edit(site, old, new)
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == f"perfcheck: error: {site}: {message}\n"
    assert "Traceback" not in result.output
    dbp = tmp_path / "site.duckdb"
    if dbp.exists():  # a time format is checked by DuckDB, once the database is open
        con = db.connect(dbp)
        assert con.execute("SELECT count(*) FROM source_files").fetchall() == [(0,)]
        con.close()


def test_ingest_loads_the_stages_of_the_sections_written_only(tmp_path):
    """A section the site file leaves out takes its stage's defaults: ingest does not load the
    later stages for it, nor pandas (DuckDB reads and stores the file; a share of the command's
    start-up, tests/benchmark.py), yet a typo in a section written still fails the first
    command."""
    site, log = write_case(tmp_path, GOOD)
    command = [sys.executable, "-c", LOADED_STAGES, "ingest", str(site), str(log)]
    out = subprocess.run(command, capture_output=True, text=True, check=True)
    assert out.stdout.splitlines()[-1] == "[]", out.stdout
    site.write_text(site.read_text() + "\n[detect]\nalpha = 0.01\n")
    out = subprocess.run(command, capture_output=True, text=True, check=True)
    loaded = "['pandas', 'perfcheck.detect', 'perfcheck.model']"
    assert out.stdout.splitlines()[-1] == loaded, out.stdout
    _edit(site, "alpha = 0.01", "alfa = 0.01")
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr.startswith(f"perfcheck: error: {site}: detect.alfa: unknown key")


def test_channel_mapped_twice(tmp_path):
    columns = (*DEFAULT_COLUMNS, ("P2", "ac_power", "W", "INV1"))
    site, log = write_case(tmp_path, GOOD, loggers=logger_toml(columns=columns))
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == (f"perfcheck: error: {site}: loggers[0].columns: 'P' and 'P2' both "
                             "map to ac_power of 'INV1'\n")


def test_site_file_not_found(tmp_path):
    result = run_ingest(tmp_path / "nope.toml", tmp_path / "x.csv")
    assert result.exit_code == 2
    assert result.stderr == f"perfcheck: error: {tmp_path / 'nope.toml'}: site file not found\n"


def test_units_and_rollover_are_read(tmp_path):
    columns = (("E", "energy_register", "MWh", "plant"),)
    site, _ = write_case(tmp_path, GOOD, loggers=logger_toml(columns=columns))
    _edit(site, 'inverter = "plant"', 'inverter = "plant"\nrollover = 100.0')
    col = load_site(site).loggers[0].columns[0]
    # 100 MWh = 1e8 Wh (SI prefix M = 1e6, BIPM SI Brochure 9th ed. 2019)
    assert (col.stored, col.device, col.rollover_wh) == ("energy_register_wh", "plant", 1e8)


def test_nan_in_a_later_section_is_refused(tmp_path):
    # underperformance_threshold_pct = nan silently turned the monthly alert off
    site, _ = write_case(tmp_path, GOOD)
    site.write_text(site.read_text() + "\n[report]\nunderperformance_threshold_pct = nan\n")
    with pytest.raises(SiteFileError) as err:
        report_settings(load_site(site))
    assert str(err.value) == (f"{site}: report.underperformance_threshold_pct: expected a "
                              "finite number, got nan")


def test_deeply_nested_array_gives_one_line(tmp_path):
    # 5,000 nested arrays exhaust Python's recursion limit inside tomllib
    site, log = write_case(tmp_path, GOOD)
    site.write_text(site.read_text() + "\n[report]\ndeep = " + "[" * 5000 + "]" * 5000 + "\n")
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == (f"perfcheck: error: {site}: not a usable site file: arrays or "
                             "tables nested too deep for the TOML reader\n")


def test_most_specific_logger_match_wins(tmp_path):
    # issue 10: a quarterly file that wrote kW where the others write W needs its own entry
    general = logger_toml(name="all", match="*.csv",
                          columns=(("P", "ac_power", "W", "INV1"), ("G", "poa", "W/m2", None)))
    special = logger_toml(name="q3_in_kw", match="log_2024-q3.csv")
    site, log = write_case(tmp_path, "ts,P,G\n2024-07-01 10:00,1.5,100\n",
                           filename="log_2024-q3.csv", loggers=general + special)
    loaded = load_site(site)
    assert loaded.logger_for(str(log)).name == "q3_in_kw"
    assert loaded.logger_for("log_2024-q2.csv").name == "all"
    assert run_ingest(site, log).exit_code == 0
    con = db.connect(tmp_path / "site.duckdb")
    # 1.5 kW = 1500 W (SI prefix k = 10^3, BIPM SI Brochure, 9th ed. 2019)
    assert con.execute("SELECT value FROM readings WHERE quantity = 'ac_power_w'").fetchall() \
        == [(1500.0,)]
    con.close()


def test_two_equally_specific_matches_are_an_error(tmp_path):
    loggers = logger_toml(name="first", match="log*.csv") + logger_toml(name="second",
                                                                        match="*log.csv")
    site, log = write_case(tmp_path, GOOD, loggers=loggers)
    result = run_ingest(site, log)
    assert result.exit_code == 2
    assert result.stderr == (f"perfcheck: error: {log}: [[loggers]] 'first' (match 'log*.csv') "
                             "and 'second' (match '*log.csv') match this file name equally "
                             "well; make one match more specific\n")


def test_commissioned_is_optional(tmp_path):
    # issue 10, item 6: two of two owners' site descriptions gave no commissioning date
    site, _ = write_case(tmp_path, GOOD)
    _edit(site, "commissioned = 2023-05-01\n", "")
    loaded = load_site(site)
    assert loaded.commissioned is None and loaded.age_record() == {
        "age_reference_date": None, "notes": []}
    first = dt.date(2024, 6, 1)
    aged = loaded.aged(first)
    assert aged.commissioned == first
    assert aged.age_record() == {"age_reference_date": "2024-06-01", "notes": [
        "no commissioning date in the site file: the age allowance starts at the first data "
        "(2024-06-01); if the modules are older, give site.commissioned or "
        "site.module_age_years_at_first_data"]}
    assert loaded.aged(None) is loaded


def test_module_age_at_first_data_moves_the_age_reference(tmp_path):
    # Invented truth: 2.5 years of 365.25 days = 913.125 days, rounded to 913 days before
    # 2024-06-01 is 2021-12-01 (2021-12-01 + 913 days: 30 + 366 + 365 + 152 days to June 1)
    site, _ = write_case(tmp_path, GOOD)
    _edit(site, "commissioned = 2023-05-01", "module_age_years_at_first_data = 2.5")
    aged = load_site(site).aged(dt.date(2024, 6, 1))
    assert aged.commissioned == dt.date(2021, 12, 1)
    assert aged.age_note == (
        "no commissioning date in the site file: the age allowance counts the modules as 2.5 "
        "years old at the first data (2024-06-01), i.e. ageing from 2021-12-01 "
        "(site.module_age_years_at_first_data)")
    # a stated commissioning date is kept as it is, with no note
    (tmp_path / "b").mkdir()
    plain, _ = write_case(tmp_path / "b", GOOD)
    kept = load_site(plain)
    assert kept.aged(dt.date(2024, 6, 1)) is kept and kept.age_record()["notes"] == []


def test_register_restarting_daily_is_read(tmp_path):
    columns = (("E", "energy_register", "kWh", "INV1"),)
    site, _ = write_case(tmp_path, GOOD, loggers=logger_toml(columns=columns))
    _edit(site, 'inverter = "INV1"', 'inverter = "INV1"\nresets = "daily"')
    assert load_site(site).loggers[0].columns[0].resets_daily
    _edit(site, 'resets = "daily"', 'resets = "weekly"')
    with pytest.raises(SiteFileError) as err:
        load_site(site)
    assert str(err.value) == (f"{site}: loggers[0].columns[0].resets: 'weekly' is not one of "
                              "'daily'")
