"""Periods: site-local months and days as [start, end) UTC instants."""

from __future__ import annotations

import datetime as dt

import pandas as pd
import pytest
from report_fixtures import write_site

from perfcheck import periods
from perfcheck.errors import DataError


def test_month_period_follows_site_zone(tmp_path):
    site = write_site(tmp_path)
    start, end = periods.month_period(site, "2025-03")
    # Europe/Zurich: UTC+1 on 1 March, UTC+2 on 1 April (DST from 30 March 2025)
    assert start == pd.Timestamp("2025-02-28T23:00Z") and end == pd.Timestamp("2025-03-31T22:00Z")
    assert periods.last_complete_month(site, pd.Timestamp("2025-07-01T00:30+02:00")) == "2025-06"


def test_day_period_includes_the_last_day(tmp_path):
    site = write_site(tmp_path)
    start, end = periods.day_period(site, dt.date(2025, 3, 29), dt.date(2025, 3, 30))
    # Europe/Zurich: summer time from 30 March 2025 01:00 UTC (EU Directive 2000/84/EC, last
    # Sunday of March), so the two local days span 47 hours
    assert start == pd.Timestamp("2025-03-28T23:00Z") and end == pd.Timestamp("2025-03-30T22:00Z")
    with pytest.raises(DataError, match=r"^--to 2025-03-01 is before --from 2025-03-02$"):
        periods.day_period(site, dt.date(2025, 3, 2), dt.date(2025, 3, 1))
