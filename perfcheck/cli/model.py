"""``perfcheck model``: build or refresh the expected series and show it beside the measured."""

from __future__ import annotations

import math
from pathlib import Path
from typing import TYPE_CHECKING

import click

from perfcheck import progress
from perfcheck.cli.common import lazy_module, refresh_quality, site_argument, utc_span
from perfcheck.site import Site

if TYPE_CHECKING:
    import pandas as pd

align = lazy_module("perfcheck.align")
db = lazy_module("perfcheck.db")
model = lazy_module("perfcheck.model")
quality = lazy_module("perfcheck.quality")


def _num(v: float, fmt: str) -> str:
    return "-" if v is None or (isinstance(v, float) and math.isnan(v)) else format(v, fmt)


def format_summary(summary: pd.DataFrame) -> str:
    """The per-inverter monthly table printed by ``perfcheck model``."""
    lines = [f"{'inverter':<12} {'month':<8} {'expected kWh':>13} {'measured kWh':>13} "
             f"{'measured/expected':>18} {'coverage':>9}"]
    for r in summary.itertuples(index=False):
        lines.append(f"{r.inverter_id:<12} {r.month:<8} {_num(r.expected_kwh, '13.1f')} "
                     f"{_num(r.measured_kwh, '13.1f')} {_num(r.ratio, '18.3f')} "
                     f"{_num(r.coverage, '9.1%')}")
    return "\n".join(lines)


@click.command("model")
@site_argument
@click.option("--quiet", is_flag=True, help="No progress bar (there is none without a terminal).")
def model_command(site: Site, db_path: Path, quiet: bool) -> None:
    """Build or refresh the expected power series from the stored weather and the site's
    design, align it with the measured power, and print expected against measured energy
    per inverter and month (site-local months).

    First the quality flags and the unit check are recomputed, when files were ingested
    since they last ran or the site file's [[corrections]] or carry_forward_min changed;
    the count per flag and each suspected unit error are printed.
    Only intervals with readings that arrived since the last run are computed; a change of
    the design or the model settings in the site file recomputes the whole history.
    The ratio uses the intervals where both values exist; coverage is the share of the
    expected energy that has a measurement.

    \b
    Example:
      perfcheck model site.toml --db site.duckdb
    """
    con = db.connect(db_path)
    try:
        sun = quality.sun_positions(site)  # computed once, for the flags and the model
        refresh_quality(con, site, sun)  # the flags of files ingested since, or new corrections
        with progress.bar("model", None, quiet) as bar:
            res = model.run(con, site, progress=bar.step, sun=sun)
        if res["computed_from"] is None:
            click.echo(f"model run {res['model_run_id']}: no new readings, nothing recomputed")
        else:
            click.echo(f"model run {res['model_run_id']}: {res['rows']} rows from "
                       f"{utc_span(res['computed_from'], res['computed_to'])}")
        click.echo(format_summary(align.monthly_summary(con, site)))
    finally:
        con.close()


COMMANDS = [model_command]
