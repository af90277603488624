"""``perfcheck demo``: the whole pipeline on the invented demo plant, inside one folder."""

from __future__ import annotations

import shutil
from pathlib import Path

import click

from perfcheck import progress
from perfcheck.cli.capacity import format_report
from perfcheck.cli.check import format_table
from perfcheck.cli.common import handle_errors, lazy_module, write_json
from perfcheck.cli.ingest import format_totals
from perfcheck.site import Site, load_site

pd = lazy_module("pandas")
capacity = lazy_module("perfcheck.capacity")
db = lazy_module("perfcheck.db")
evidence = lazy_module("perfcheck.evidence")
ingest = lazy_module("perfcheck.ingest")
metrics = lazy_module("perfcheck.metrics")
pipeline = lazy_module("perfcheck.pipeline")
report = lazy_module("perfcheck.report")
scenario = lazy_module("perfcheck.scenario")

# The capacity ratio the demo's (invented) contract guarantees.
DEMO_GUARANTEED_RATIO = 0.97


def _heading(text: str) -> None:
    click.echo(f"\n== {text} ==")


def copy_demo(out_dir: Path) -> Path:
    """Copy the demo site file and its logger files into ``out_dir``; return the site file."""
    src = scenario.demo_dir()
    site = load_site(src / "site.toml")
    (out_dir / "logs").mkdir(parents=True, exist_ok=True)
    shutil.copyfile(src / "site.toml", out_dir / "site.toml")
    for path in ingest.logger_files(site, src):
        shutil.copyfile(path, out_dir / "logs" / path.name)
    return out_dir / "site.toml"


def format_coverage(cov: pd.DataFrame) -> str:
    """Per channel: months covered, the lowest monthly share, and quarantined lines."""
    lines = [f"{'channel':<28}{'months':>7}{'lowest month':>22}{'quarantined lines':>19}"]
    for (quantity, device), g in cov.groupby(["quantity", "device"], sort=True):
        worst = g.loc[g["share"].idxmin()]
        lines.append(f"{quantity + ' / ' + device:<28}{len(g):>7}"
                     f"{worst['month'] + f' {worst.share:6.1%}':>22}"
                     f"{int(g['quarantined'].sum()):>19}")
    return "\n".join(lines)


def first_clear_weeks(site: Site) -> tuple[pd.Timestamp, pd.Timestamp]:
    """Three weeks from the commissioning date: the acceptance window of the demo."""
    start = pd.Timestamp(site.commissioned, tz=site.timezone)
    return start.tz_convert("UTC"), (start + pd.Timedelta(days=21)).tz_convert("UTC")


@click.command("demo")
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              default=Path("demo_out"), show_default=True,
              help="Folder for everything the demo writes; nothing is written outside it.")
@click.option("--quiet", is_flag=True, help="No progress bars.")
@handle_errors
def demo_command(out_dir: Path, quiet: bool) -> None:
    """Run every stage on the invented demo plant "Solarpark Talbrunn" (two years of
    5-minute logger files with injected faults): ingest with its accounting in total, data
    coverage, the expected series, the monthly performance table, the findings, the capacity
    test of the first weeks, the report and an evidence bundle, which is then verified. The
    last lines name the files to open.

    \b
    Example:
      perfcheck demo --out demo_out
    """
    site_file = copy_demo(out_dir)
    site = load_site(site_file)
    con = db.connect(db.default_db_path(site_file))
    try:
        _heading(f"ingest: {site.name} (invented plant), logger files in {out_dir / 'logs'}")
        files = ingest.logger_files(site, out_dir / "logs")
        results = pipeline.update(con, site, files, quiet=quiet)
        click.echo(format_totals(results))
        click.echo("(the accounting per file: perfcheck ingest; expected against measured "
                   "energy per inverter and month: perfcheck model)")

        _heading("data coverage per channel (site-local months)")
        click.echo(format_coverage(ingest.coverage_summary(con, site)))

        _heading("performance per month, findings")
        with progress.stage("check: metrics and findings", quiet):
            start, end = metrics.resolve_period(con, site, None, None)
            doc = pipeline.view(con, site, start, end)
        write_json(out_dir / "check.json", doc)
        click.echo(format_table(doc, site))

        _heading("capacity test (ASTM E2848), first three weeks after commissioning, "
                 f"guaranteed ratio {DEMO_GUARANTEED_RATIO}")
        cap_start, cap_end = first_clear_weeks(site)
        with progress.stage("capacity: filters and regressions", quiet):
            cap = capacity.run(con, site, cap_start, cap_end, DEMO_GUARANTEED_RATIO)
        write_json(out_dir / "capacity.json", cap)
        click.echo(format_report(cap))

        _heading("report and evidence bundle")
        with progress.stage("report: analysis, figures, HTML and PDF", quiet):
            paths = report.write_report(con, site, start, end, out_dir / "report")
        with progress.stage("evidence: analysis, report and bundle", quiet):
            bundle = evidence.build_bundle(con, site, start, end, out_dir / "evidence.zip",
                                           f"perfcheck demo --out {out_dir}")
    finally:
        con.close()
    with progress.stage("verify: hashes and re-run", quiet):
        check = evidence.verify_bundle(Path(bundle["path"]))
    click.echo(f"evidence bundle {'verified' if check.ok else 'NOT verified'}: "
               f"{check.files_checked} files against the manifest, analysis re-run from the "
               "bundle alone")
    _heading("open these")
    click.echo(f"report:          {paths['html']}")
    click.echo(f"report as PDF:   {paths['pdf']}")
    click.echo(f"evidence bundle: {bundle['path']} ({bundle['files']} files)")
    click.echo(f"check document:  {out_dir / 'check.json'}")


COMMANDS = [demo_command]
