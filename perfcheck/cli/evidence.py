"""``perfcheck evidence`` and ``perfcheck verify``: claim bundles and their check."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

from perfcheck import progress
from perfcheck.cli.common import (
    UserError,
    handle_errors,
    lazy_module,
    period_args,
    period_options,
    resolve_period,
    site_argument,
)
from perfcheck.site import Site

db = lazy_module("perfcheck.db")
evidence = lazy_module("perfcheck.evidence")


@click.command("evidence")
@site_argument
@period_options
@click.option("--out", "out_zip", type=click.Path(dir_okay=False, path_type=Path),
              required=True, help="The bundle to write, e.g. claim.zip.")
@click.option("--force", is_flag=True, help="Replace the bundle if it exists already.")
def evidence_command(site: Site, db_path: Path, month: str | None, date_from: Any,
                     date_to: Any, out_zip: Path, force: bool) -> None:
    """Write an evidence bundle for a warranty or insurance claim: raw logger files, site
    file, results (JSON, CSV), guarantee findings, report PDF and figures, coverage, methods,
    versions, the exact command, and a manifest with the sha256 of every file. An existing
    bundle is kept unless --force is given.

    \b
    Example:
      perfcheck evidence site.toml --from 2025-04-01 --to 2025-06-30 --out claim.zip
    """
    if out_zip.exists() and not force:
        raise UserError(f"{out_zip}: a bundle exists already; give --force to replace it")
    start, end = resolve_period(site, month, date_from, date_to)
    command = f"perfcheck evidence {site.path} {period_args(month, date_from, date_to)} " \
              f"--out {out_zip}"
    con = db.connect(db_path)  # the check stores its events
    try:
        with progress.stage("evidence: analysis, report and bundle"):
            out = evidence.build_bundle(con, site, start, end, out_zip, command)
    finally:
        con.close()
    click.echo(f"bundle: {out['path']} ({out['files']} files)")
    click.echo(f"manifest sha256: {out['manifest_sha256']} (quote it in the claim)")


@click.command("verify")
@click.argument("bundle", type=click.Path(dir_okay=False, path_type=Path))
@click.option("--no-rerun", is_flag=True, help="Check the hashes only, do not re-run.")
@handle_errors
def verify_command(bundle: Path, no_rerun: bool) -> None:
    """Check an evidence bundle: every file against its sha256 in the manifest (naming any
    changed byte), then re-run the analysis from the bundle alone in a temporary folder and
    compare the results. Exit code 0 when everything matches, 1 when not, 2 when the bundle
    cannot be read as one (malformed, oversized, or naming files outside itself).

    \b
    Example:
      perfcheck verify claim.zip
    """
    with progress.stage("verify: hashes" + ("" if no_rerun else " and re-run")):
        v = evidence.verify_bundle(bundle, rerun_analysis=not no_rerun)
    click.echo(f"manifest sha256: {v.manifest_sha256}")
    click.echo(f"files checked: {v.files_checked}")
    for note in v.notes:
        click.echo(note)
    for problem in v.problems:
        click.echo(f"FAILED: {problem}", err=True)
    click.echo("verified" if v.ok else "NOT verified")
    if not v.ok:
        raise SystemExit(1)


COMMANDS = [evidence_command, verify_command]
