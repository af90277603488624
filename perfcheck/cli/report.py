"""``perfcheck report``: the HTML and PDF report for a month or a span of days."""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click
import pandas as pd

from perfcheck import db, report
from perfcheck.cli.common import UserError, site_argument
from perfcheck.site import Site

DATE = click.DateTime(formats=["%Y-%m-%d"])


def period_options(fn: Callable) -> Callable:
    """--month or --from/--to (site-local days, both included)."""
    fn = click.option("--to", "date_to", type=DATE, default=None,
                      help="Last day, site-local, included (YYYY-MM-DD).")(fn)
    fn = click.option("--from", "date_from", type=DATE, default=None,
                      help="First day, site-local (YYYY-MM-DD).")(fn)
    return click.option("--month", default=None, help="A calendar month, YYYY-MM.")(fn)


def resolve_period(site: Site, month: str | None, date_from: dt.datetime | None,
                   date_to: dt.datetime | None) -> tuple[pd.Timestamp, pd.Timestamp]:
    """The [start, end) in UTC from the period options; refuses conflicting options."""
    if month and (date_from or date_to):
        raise UserError("give either --month or --from/--to, not both")
    if month:
        return report.month_period(site, month)
    if date_from is None or date_to is None:
        raise UserError("give --month YYYY-MM, or both --from and --to")
    return report.day_period(site, date_from.date(), date_to.date())


def period_args(site: Site, month: str | None, date_from: Any, date_to: Any) -> str:
    if month:
        return f"--month {month}"
    return f"--from {date_from:%Y-%m-%d} --to {date_to:%Y-%m-%d}"


@click.command("report")
@site_argument
@period_options
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              required=True, help="Folder for report.html, report.pdf, JSON, CSV and figures.")
def report_command(site: Site, db_path: Path, month: str | None, date_from: Any, date_to: Any,
                   out_dir: Path) -> None:
    """Write the report for a period: a self-contained HTML file (opens without network)
    and the same content as PDF, with check.json, events.csv, monthly.csv and the figures.

    \b
    Example:
      perfcheck report site.toml --month 2025-06 --out reports/2025-06
      perfcheck report site.toml --from 2025-01-01 --to 2025-06-30 --out reports/h1
    """
    start, end = resolve_period(site, month, date_from, date_to)
    con = db.connect(db_path)  # the check stores its events
    try:
        paths = report.write_report(con, site, start, end, out_dir)
    finally:
        con.close()
    click.echo(f"report: {paths['html']}")
    click.echo(f"pdf: {paths['pdf']}")


COMMANDS = [report_command]
