"""What every command shares: the site argument, the database option, the period options,
error handling."""

from __future__ import annotations

import datetime as dt
import errno
import functools
import json
import sys
from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import click

from perfcheck.errors import DataError, PerfcheckError
from perfcheck.lazy import lazy_module
from perfcheck.site import Site, load_site

if TYPE_CHECKING:
    import duckdb
    import pandas as pd

    from perfcheck import physics


db = lazy_module("perfcheck.db")
periods = lazy_module("perfcheck.periods")
quality = lazy_module("perfcheck.quality")
sections = lazy_module("perfcheck.sections")
units = lazy_module("perfcheck.units")

EXIT_INPUT_ERROR = 2


class UserError(click.ClickException):
    """One line on stderr, exit code 2, no traceback."""

    exit_code = EXIT_INPUT_ERROR

    def show(self, file: Any = None) -> None:
        click.echo(f"perfcheck: error: {self.format_message()}", err=True)


def handle_errors(fn: Callable) -> Callable:
    """Turn the library's exceptions into one-line errors with exit code 2."""

    @functools.wraps(fn)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return fn(*args, **kwargs)
        except PerfcheckError as exc:
            raise UserError(str(exc)) from None
        except KeyboardInterrupt:
            click.echo("perfcheck: interrupted; the last file in progress was rolled back",
                       err=True)
            sys.exit(130)
        except Exception as exc:
            if not disk_full(exc):
                raise
            raise UserError("no space left on the disk; the write in progress was rolled back. "
                            "Free some space and run the command again") from None

    return wrapper


def disk_full(exc: BaseException) -> bool:
    """True for an error of a full disk, from the OS or from DuckDB (which raises its own
    exception types with the OS's message in the text)."""
    return (isinstance(exc, OSError) and exc.errno == errno.ENOSPC) or (
        "No space left on device" in str(exc))


def site_argument(fn: Callable) -> Callable:
    """SITE_FILE argument plus --db; passes ``site`` (loaded) and ``db_path`` to the command."""

    @click.argument("site_file", type=click.Path(dir_okay=False, path_type=Path))
    @click.option(
        "--db",
        "db_path",
        type=click.Path(dir_okay=False, path_type=Path),
        default=None,
        help="Database file (default: beside the site file, same name, .duckdb).",
    )
    @functools.wraps(fn)
    @handle_errors
    def wrapper(site_file: Path, db_path: Path | None, **kwargs: Any) -> Any:
        site = sections.validate(load_site(site_file))
        return fn(site=site, db_path=db_path or db.default_db_path(site_file), **kwargs)

    return wrapper



DATE = click.DateTime(formats=["%Y-%m-%d"])


def day_options(from_help: str, to_help: str,
                required: bool = False) -> Callable[[Callable], Callable]:
    """--from/--to (``date_from``, ``date_to``): site-local days, both included."""

    def decorate(fn: Callable) -> Callable:
        fn = click.option("--to", "date_to", type=DATE, default=None, required=required,
                          help=to_help)(fn)
        return click.option("--from", "date_from", type=DATE, default=None, required=required,
                            help=from_help)(fn)

    return decorate


def period_options(fn: Callable) -> Callable:
    """--month or --from/--to (site-local days, both included); see :func:`resolve_period`."""
    fn = day_options("First day, site-local (YYYY-MM-DD).",
                     "Last day, site-local, included (YYYY-MM-DD).")(fn)
    return click.option("--month", default=None, help="A calendar month, YYYY-MM.")(fn)


def resolve_period(site: Site, month: str | None, date_from: dt.datetime | None,
                   date_to: dt.datetime | None) -> tuple[pd.Timestamp, pd.Timestamp]:
    """The [start, end) in UTC from the period options; refuses conflicting options."""
    if month and (date_from or date_to):
        raise UserError("give either --month or --from/--to, not both")
    if month:
        return periods.month_period(site, month)
    if date_from is None or date_to is None:
        raise UserError("give --month YYYY-MM, or both --from and --to")
    return periods.day_period(site, date_from.date(), date_to.date())


def period_args(month: str | None, date_from: Any, date_to: Any) -> str:
    """The period options as typed, for the command line recorded with a result."""
    if month:
        return f"--month {month}"
    return f"--from {date_from:%Y-%m-%d} --to {date_to:%Y-%m-%d}"


def refresh_quality(con: duckdb.DuckDBPyConnection, site: Site,
                    sun: physics.SunPositions | None = None) -> None:
    """Recompute the quality stage (flags and unit check) when it is stale: files ingested
    since it last ran, or the site file's [[corrections]] or carry_forward_min changed. Print
    the count per flag and each suspected unit error. The sun it computes is kept in ``sun``
    (for the model of the same command)."""
    if not quality.stale(con, site):
        return
    counts = quality.run(con, site, sun)
    click.echo("quality flags: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    for line in units.words(units.report(con)):
        click.echo(line)


def utc_span(first: dt.datetime, last: dt.datetime) -> str:
    """``YYYY-MM-DD HH:MM to YYYY-MM-DD HH:MM UTC`` for two UTC instants."""
    return f"{first:%Y-%m-%d %H:%M} to {last:%Y-%m-%d %H:%M} UTC"


def json_option(what: str) -> Callable[[Callable], Callable]:
    """--json PATH (``json_path``): write ``what`` to PATH, or to stdout alone with '-'."""
    return click.option(
        "--json", "json_path", default=None,
        type=click.Path(dir_okay=False, allow_dash=True, path_type=Path),
        help=f"Write {what} to this JSON file; '-' writes it to stdout alone (the text "
             "then goes to stderr).")


def _to_stdout(path: Path | None) -> bool:
    return path is not None and str(path) == "-"


def json_target(path: Path | None) -> None:
    """Refuse a --json path whose folder does not exist, before any work starts."""
    if path is not None and not _to_stdout(path) and not path.parent.is_dir():
        raise DataError(f"{path}: the folder for the JSON file does not exist")


def json_text(doc: dict[str, Any]) -> str:
    return json.dumps(doc, indent=1, ensure_ascii=False) + "\n"


def write_json(path: Path, doc: dict[str, Any]) -> None:
    """Write a result document as UTF-8 JSON; a path that cannot be written is a user error."""
    try:
        path.write_text(json_text(doc), encoding="utf-8")
    except OSError as exc:
        raise DataError(f"{path}: cannot write the JSON file ({exc.strerror})") from None


def emit(text: str, doc: dict[str, Any], json_path: Path | None) -> None:
    """Print a command's text and write its document as --json asked: with '-' the JSON is
    all that goes to stdout and the text goes to stderr."""
    if _to_stdout(json_path):
        click.echo(text, err=True)
        click.echo(json_text(doc), nl=False)
        return
    if json_path is not None:
        write_json(json_path, doc)
    click.echo(text)
