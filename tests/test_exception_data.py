"""Report-by-exception historian exports (issue 10, item 4): a point's value is written only
when it changed, and holds on the logger's interval grid until its next value, for at most
``carry_forward_min``. The export is invented; the truth stated is the rule itself."""

from __future__ import annotations

import pandas as pd
import pytest
from logger_files import checked, write_case

from perfcheck.errors import SiteFileError
from perfcheck.site import load_site

HISTORIAN = """\
[[loggers]]
name = "scada"
match = "scada_*.csv"
interval_min = 5
device_column = "device"
point_column = "point"
value_column = "value"
{carry}
[loggers.devices]
"WR 1" = "INV1"
"Meteo" = "site"
[loggers.time]
columns = ["time"]
kind = "utc"
format = "%Y-%m-%d %H:%M:%S"
[[loggers.columns]]
name = "Pac"
quantity = "ac_power"
unit = "kW"
[[loggers.columns]]
name = "Irr"
quantity = "poa"
unit = "W/m2"
"""
BODY = ("time,device,point,value\n"
        "2024-06-01 10:00:00,WR 1,Pac,1.5\n2024-06-01 10:00:00,Meteo,Irr,500\n"
        "2024-06-01 10:12:30,WR 1,Pac,2.0\n"
        "2024-06-01 11:00:00,WR 1,Pac,3.0\n")


def _power(tmp_path, carry: str) -> list[tuple[str, float, int]]:
    site_path, log = write_case(tmp_path, BODY, filename="scada_06.csv",
                                loggers=HISTORIAN.format(carry=carry))
    (res,), _, con, _ = checked(tmp_path, site_path, log)
    assert (res.rows_read, res.rows_loaded) == (4, 4)  # carried values are not lines
    rows = con.execute("SELECT ts, value, line FROM readings WHERE quantity = 'ac_power_w' "
                       "ORDER BY ts").fetchall()
    return [(pd.Timestamp(t).tz_convert("UTC").strftime("%H:%M:%S"), v, n) for t, v, n in rows]


def test_values_are_carried_on_the_grid_up_to_the_limit(tmp_path):
    # 1.5 kW holds until 2.0 kW is written at 10:12:30; 2.0 kW holds 15 minutes (to 10:27:30),
    # then nothing until 11:00; 3.0 kW holds 15 minutes. Each carried value keeps its line.
    assert _power(tmp_path, "carry_forward_min = 15") == [
        ("10:00:00", 1500.0, 2), ("10:05:00", 1500.0, 2), ("10:10:00", 1500.0, 2),
        ("10:12:30", 2000.0, 4), ("10:15:00", 2000.0, 4), ("10:20:00", 2000.0, 4),
        ("10:25:00", 2000.0, 4),
        ("11:00:00", 3000.0, 5), ("11:05:00", 3000.0, 5), ("11:10:00", 3000.0, 5),
        ("11:15:00", 3000.0, 5)]


def test_without_the_key_only_written_values_are_read(tmp_path):
    assert [t for t, _, _ in _power(tmp_path, "")] == ["10:00:00", "10:12:30", "11:00:00"]


def test_carry_forward_needs_a_historian(tmp_path):
    site_path, _ = write_case(tmp_path, "x\n", carry_forward_min=15)
    with pytest.raises(SiteFileError) as err:
        load_site(site_path)
    assert str(err.value) == (f"{site_path}: loggers[0].carry_forward_min: only a historian "
                              "export (point_column) writes a value only when it changed")


def test_gaps_follow_the_carried_values_of_the_same_run(tmp_path):
    # The flags of the run that carries the values see them: 2.0 kW holds to 10:27:30, so the
    # only gap of the power channel starts at 10:30 (up to 11:00), not at 10:05 and 10:17:30
    # where the written values alone leave holes (the rule stated in the module docstring).
    site_path, log = write_case(tmp_path, BODY, filename="scada_06.csv",
                                loggers=HISTORIAN.format(carry="carry_forward_min = 15"))
    _, _, con, _ = checked(tmp_path, site_path, log)
    gaps = con.execute("SELECT strftime(ts, '%H:%M:%S'), detail FROM flags WHERE flag = 'gap' "
                       "AND quantity = 'ac_power_w' ORDER BY ts").fetchall()
    assert gaps == [("10:30:00", "6 missing interval(s) of 5 min, up to 2024-06-01 10:55 UTC")]
