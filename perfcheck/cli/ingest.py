"""``perfcheck ingest``: logger files into the site database, with the accounting per file."""

from __future__ import annotations

from pathlib import Path

import click

from perfcheck import db, quality
from perfcheck.cli.common import site_argument, utc_span
from perfcheck.ingest import FileResult, expand_paths, ingest_files
from perfcheck.site import Site


def format_result(res: FileResult) -> str:
    """One line of accounting for a file, as printed by ``perfcheck ingest`` and the demo."""
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
    quarantined with its line number, raw text and reason; the accounting is printed per
    file. A value that differs from a stored one is never overwritten: it is kept in the
    table conflicts and its row quarantined. A file already ingested changes nothing.
    After loading, the quality flags are recomputed (they never delete a reading); also
    when an earlier run was stopped before its flags were stored.

    \b
    Example:
      perfcheck ingest site.toml 'logs/*.csv' --db site.duckdb
    """
    paths = expand_paths(files)
    con = db.connect(db_path)
    try:
        results = ingest_files(con, site, paths, progress=lambda r: click.echo(format_result(r)))
        click.echo(format_totals(results))
        if any(r.status == "loaded" for r in results) or quality.stale(con):
            counts = quality.run(con, site)
            click.echo("quality flags: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
    finally:
        con.close()


COMMANDS = [ingest_command]
