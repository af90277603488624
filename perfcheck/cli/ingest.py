"""``perfcheck ingest``: logger files into the site database, with the accounting per file."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import click

from perfcheck import atomic
from perfcheck.cli.common import lazy_module, site_argument, utc_span
from perfcheck.site import Site

if TYPE_CHECKING:
    import pandas as pd

    from perfcheck.ingest import FileResult

db = lazy_module("perfcheck.db")
ingest = lazy_module("perfcheck.ingest")


def format_result(res: FileResult) -> str:
    """One line of accounting for a file, as printed by ``perfcheck ingest``."""
    if res.status == "already ingested":
        return f"{res.path}: already ingested (file {res.file_id}), nothing changed"
    span = ""
    if res.first_ts is not None:
        span = f", {utc_span(res.first_ts, res.last_ts)}"
    return (
        f"{res.path}: {res.rows_read} rows read = {res.rows_loaded} loaded"
        f" + {res.rows_duplicate} duplicate + {res.rows_quarantined} quarantined;"
        f" {res.conflicts} conflicting values{span}"
    )


def format_totals(results: list[FileResult]) -> str:
    done = [r for r in results if r.status == "loaded"]
    return (
        f"total: {len(done)} file(s) loaded, {len(results) - len(done)} already ingested;"
        f" {sum(r.rows_read for r in done)} rows read = {sum(r.rows_loaded for r in done)} loaded"
        f" + {sum(r.rows_duplicate for r in done)} duplicate"
        f" + {sum(r.rows_quarantined for r in done)} quarantined;"
        f" {sum(r.conflicts for r in done)} conflicting values"
    )


@click.command("ingest")
@site_argument
@click.argument("files", nargs=-1, required=True)
def ingest_command(site: Site, db_path: Path, files: tuple[str, ...]) -> None:
    """Load logger files (paths or quoted globs) into the site database.

    Every data row of a file is loaded, recognised as a duplicate of a stored row, or
    quarantined with its line number, raw text and reason (listed by 'perfcheck
    quarantine'); the accounting is printed per file. A value that differs from a stored
    one is never overwritten: it is kept in the table conflicts and its row quarantined. A
    file already ingested changes nothing.
    The quality flags (they never delete a reading) and the unit check follow the sun, so
    the next 'perfcheck model' recomputes them, before the model, and prints them.

    \b
    Example:
      perfcheck ingest site.toml 'logs/*.csv' --db site.duckdb
    """
    paths = ingest.expand_paths(files)
    con = db.connect(db_path)
    try:
        results = ingest.ingest_files(con, site, paths,
                                      progress=lambda r: click.echo(format_result(r)))
        click.echo(format_totals(results))
    finally:
        con.close()


def format_quarantine(rows: pd.DataFrame, limit: int | None) -> str:
    """The quarantined lines (file:line: reason, then the raw text indented), at most
    ``limit`` of them, then the counts by kind of reason."""
    out = []
    for r in rows.head(limit).itertuples():
        out += [f"{r.file}:{r.line}: {r.reason}", f"    {r.raw}"]
    if limit is not None and len(rows) > limit:
        out.append(f"... {len(rows) - limit} more line(s) not shown (--limit)")
    counts = rows.groupby("reason_kind", sort=False).size().sort_values(ascending=False,
                                                                        kind="stable")
    out.append("counts by reason:")
    out += [f"  {n:>7}  {kind}" for kind, n in counts.items()]
    out.append(f"total: {len(rows)} quarantined line(s) in {rows['file'].nunique()} file(s)")
    return "\n".join(out)


@click.command("quarantine")
@site_argument
@click.option("--limit", type=click.IntRange(min=0), default=None,
              help="Show at most this many lines (the counts cover all).")
@click.option("--csv", "csv_path", type=click.Path(dir_okay=False, path_type=Path),
              default=None, help="Also write every quarantined line to this CSV file.")
def quarantine_command(site: Site, db_path: Path, limit: int | None,
                       csv_path: Path | None) -> None:
    """List the quarantined lines of the ingested logger files: file, line number, reason
    and the raw text, then the counts by kind of reason.

    \b
    Example:
      perfcheck quarantine site.toml --limit 20 --csv quarantine.csv
    """
    con = db.connect(db_path, read_only=True)
    try:
        rows = ingest.quarantined(con)
    finally:
        con.close()
    if rows.empty:
        click.echo("no quarantined lines")
        return
    if csv_path is not None:
        with atomic.replacing_file(csv_path) as tmp:
            rows.drop(columns="reason_kind").to_csv(tmp, index=False)
    click.echo(format_quarantine(rows, limit))


COMMANDS = [ingest_command, quarantine_command]
