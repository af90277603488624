"""``perfcheck analyse``: the whole history analysed once and stored, for every view to read."""

from __future__ import annotations

from pathlib import Path

import click

from perfcheck.site import Site

from .check import open_db
from .common import lazy_module, site_argument

analysis = lazy_module("perfcheck.analysis")
metrics = lazy_module("perfcheck.metrics")


@click.command("analyse")
@site_argument
def analyse_command(site: Site, db_path: Path) -> None:
    """Run every detector over the site's whole stored history and store the events, the loss
    ledger and the daily metric sums. Nothing is done when the logger files, the expected
    series, the site file and the versions are those of the stored analysis. check, report,
    monthly, evidence and capacity read the stored analysis (and make it first when it is
    missing or out of date).

    \b
    Example:
      perfcheck analyse site.toml
    """
    con = open_db(db_path)
    try:
        stored = analysis.update(con, site)
    finally:
        con.close()
    state = "made" if stored.created else "up to date, nothing to do"
    click.echo(f"analysis {stored.id} ({state}): {site.timezone} days "
               f"{metrics.local_iso(stored.first_ts, site)[:10]} to "
               f"{metrics.local_iso(stored.end_ts, site)[:10]} (end excluded)")


COMMANDS = [analyse_command]
