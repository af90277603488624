"""Analysis periods: site-local calendar months and days as [start, end) UTC instants.

The site's IANA zone sets the day and month boundaries (the data contract: every stored instant
is UTC; the zone only decides where a day begins), so a month or day is 23, 24 or 25 hours long
around the daylight-saving changes.
"""

from __future__ import annotations

import datetime as dt

import pandas as pd

from perfcheck.errors import DataError, PerfcheckError
from perfcheck.site import Site


def month_period(site: Site, month: str) -> tuple[pd.Timestamp, pd.Timestamp]:
    """[start, end) of a calendar month ``YYYY-MM`` in the site's zone, as UTC instants."""
    try:
        first = dt.datetime.strptime(month, "%Y-%m")
    except ValueError:
        raise PerfcheckError(f"--month: {month!r} is not a month like 2025-06") from None
    start = pd.Timestamp(first, tz=site.timezone)
    return start.tz_convert("UTC"), (start + pd.DateOffset(months=1)).tz_convert("UTC")


def day_period(site: Site, first: dt.date, last: dt.date) -> tuple[pd.Timestamp, pd.Timestamp]:
    """[start of ``first``, end of ``last``] in the site's zone (both days included), in UTC."""
    if last < first:
        raise DataError(f"--to {last} is before --from {first}")
    start = pd.Timestamp(first, tz=site.timezone)
    end = pd.Timestamp(last + dt.timedelta(days=1), tz=site.timezone)
    return start.tz_convert("UTC"), end.tz_convert("UTC")


def last_complete_month(site: Site, now: pd.Timestamp | None = None) -> str:
    """The month before the current one in the site's zone, ``YYYY-MM``."""
    now = (now or pd.Timestamp.now(tz="UTC")).tz_convert(site.timezone)
    return (now.replace(day=1) - pd.Timedelta(days=1)).strftime("%Y-%m")
