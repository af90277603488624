"""What every command shares: the site argument, the database option, error handling."""

from __future__ import annotations

import functools
import sys
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click

from perfcheck import db
from perfcheck.errors import PerfcheckError
from perfcheck.site import load_site

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

    return wrapper


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
        site = load_site(site_file)
        return fn(site=site, db_path=db_path or db.default_db_path(site_file), **kwargs)

    return wrapper

