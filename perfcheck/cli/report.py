"""``perfcheck report``: the HTML and PDF report for a month or a span of days."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import click

from perfcheck import atomic, progress
from perfcheck.cli.common import lazy_module, period_options, resolve_period, site_argument
from perfcheck.site import Site

db = lazy_module("perfcheck.db")
report = lazy_module("perfcheck.report")


@click.command("report")
@site_argument
@period_options
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              required=True, help="Folder for report.html, report.pdf, JSON, CSV and figures.")
def report_command(site: Site, db_path: Path, month: str | None, date_from: Any, date_to: Any,
                   out_dir: Path) -> None:
    """Write the report for a period: a self-contained HTML file (opens without network)
    and the same content as PDF, with check.json, events.csv, monthly.csv and the figures.
    A period without data gets a report that says so, and the exit code 1.

    \b
    Example:
      perfcheck report site.toml --month 2025-06 --out reports/2025-06
      perfcheck report site.toml --from 2025-01-01 --to 2025-06-30 --out reports/h1
    """
    start, end = resolve_period(site, month, date_from, date_to)
    con = db.connect(db_path)  # the check stores its events
    try:
        with progress.stage("report: analysis, figures, HTML and PDF"), \
                atomic.replacing_dir(out_dir) as tmp:  # all files or none
            paths = report.write_report(con, site, start, end, tmp)
            doc = json.loads(paths["json"].read_text(encoding="utf-8"))
            missing = report.no_data(doc) and report.verdict(
                doc, site.timezone, report.db_quality(con, start, end)["feeds"])
    finally:
        con.close()
    click.echo(f"report: {out_dir / paths['html'].relative_to(tmp)}")
    click.echo(f"pdf: {out_dir / paths['pdf'].relative_to(tmp)}")
    if missing:
        click.echo(f"perfcheck: {missing}", err=True)
        raise click.exceptions.Exit(1)


COMMANDS = [report_command]
