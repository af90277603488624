"""``perfcheck monthly``: the job for cron."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from perfcheck import progress
from perfcheck.cli.common import UserError, lazy_module, site_argument
from perfcheck.errors import PerfcheckError
from perfcheck.site import Site

monthly = lazy_module("perfcheck.monthly")
report = lazy_module("perfcheck.report")


class Busy(UserError):
    @property
    def exit_code(self) -> int:  # type: ignore[override]
        return monthly.EXIT_BUSY


@click.command("monthly")
@site_argument
@click.option("--month", default=None, help="Month to analyse, YYYY-MM (default: the last "
              "complete month in the site's time zone).")
@click.option("--out", "out_root", type=click.Path(file_okay=False, path_type=Path),
              default=None, help="Output root (default: [report] out_dir beside the site file).")
@click.option("--verbose", is_flag=True, help="Log to stderr too, and print the summary even "
              "when all is well.")
@click.option("--quiet", is_flag=True, help="No progress bars (there are none without a "
              "terminal anyway).")
def monthly_command(site: Site, db_path: Path, month: str | None, out_root: Path | None,
                    verbose: bool, quiet: bool) -> None:
    """Ingest new files from the site's inbox (site.inbox), analyse the last complete month,
    write report, JSON and CSV into <out>/<YYYY-MM>/, add the month to the history and compare
    it with the previous months. Silent when healthy (unless --verbose); otherwise one
    paragraph on stderr. Exit codes: 0 healthy, 1 underperformance or no verdict, 2 input or
    configuration error, 3 critical event (outage), 4 another run holds the lock.

    \b
    Example (crontab: 06:15 on the 2nd of every month):
      15 6 2 * * perfcheck monthly /srv/pv/site.toml
    """
    settings = report.report_settings(site)
    root = out_root or site.path.parent / settings.out_dir
    log = progress.setup_logging(root / settings.log_file, verbose)
    command = " ".join(["perfcheck", "monthly", str(site.path)] + (["--month", month] if month
                                                                   else []))
    try:
        with progress.stage("monthly", quiet):
            outcome = monthly.run_monthly(site, db_path, month, root, command, quiet)
    except monthly.LockBusy as exc:
        log.error("%s", exc)
        raise Busy(str(exc)) from None
    except PerfcheckError as exc:
        log.error("%s", exc)
        raise
    if outcome.exit_code != monthly.EXIT_HEALTHY and not verbose:  # verbose: logged already
        click.echo(outcome.summary, err=True)
    sys.exit(outcome.exit_code)


COMMANDS = [monthly_command]
