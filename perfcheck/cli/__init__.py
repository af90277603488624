"""The command line: a thin shell over the stages.

Each module in this package holds the commands of one stage and lists them in ``COMMANDS``.
The table below names each command's module and its one-line help; a module is imported only
when its command runs (or shows its own help), so ``perfcheck --help``, ``--version`` and
shell completion start without pandas, DuckDB, pvlib or matplotlib. Adding a command means
adding it to its stage's module and one row here (a test checks the two agree).
"""

from __future__ import annotations

import atexit
import gc
import importlib
import os
from pathlib import Path
from typing import Any

import click
from click.shell_completion import CompletionItem

from perfcheck import __version__, progress

# A command leaves over a hundred thousand objects of pandas, matplotlib and its results;
# the interpreter's last garbage collections walk them all at exit (about 0.3 s of CPU) only
# to free memory the operating system takes back anyway. Frozen as the process exits (the
# handler runs after those registered later, such as the removal of temporary folders), they
# are left to it.
atexit.register(gc.freeze)

# numpy's OpenBLAS spreads a matrix product over every core. A command's products are small
# (the bootstrap's resampled sums, the regressions' normal equations): on a busy two-core
# machine handing them to threads took more than computing them (check of a 1-minute
# site-year: 0.25 s of 0.8 s of CPU), and a long dot product, summed in one piece per thread,
# changed in its last digits with the machine's core count. One thread, unless the user sets
# it; OpenBLAS reads it when numpy loads, which no module loaded so far does.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

# name: (module in this package, one-line help shown by ``perfcheck --help``), in pipeline order
COMMANDS: dict[str, tuple[str, str]] = {
    "demo": ("demo", "Run every stage on the invented demo plant, inside one folder."),
    "ingest": ("ingest", "Load logger files into the site database, with the accounting."),
    "quarantine": ("ingest", "List the quarantined lines of the logger files, with counts."),
    "model": ("model", "Build the expected power series; expected against measured energy."),
    "analyse": ("analysis", "Analyse the whole stored history once and store the findings."),
    "check": ("check", "Yields, performance ratios, availability per month; the findings."),
    "capacity": ("capacity", "Capacity test for acceptance (ASTM E2848)."),
    "report": ("report", "Write the HTML and PDF report for a month or a span of days."),
    "evidence": ("evidence", "Write an evidence bundle (zip with manifest) for a claim."),
    "verify": ("evidence", "Check an evidence bundle's hashes and re-run its analysis."),
    "monthly": ("monthly", "The job for cron: ingest the inbox, analyse and report a month."),
}


class LazyGroup(click.Group):
    """A group that lists its commands from :data:`COMMANDS` and imports a command's module
    only when the command is used."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return list(COMMANDS)

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        if name not in COMMANDS:
            return None
        module_name, short_help = COMMANDS[name]
        module = importlib.import_module(f"{__name__}.{module_name}")
        command = next(c for c in module.COMMANDS if c.name == name)
        command.short_help = short_help
        return command

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        with formatter.section("Commands"):
            formatter.write_dl([(name, short) for name, (_, short) in COMMANDS.items()])

    def shell_complete(self, ctx: click.Context, incomplete: str) -> list[Any]:
        names = [CompletionItem(name, help=short) for name, (_, short) in COMMANDS.items()
                 if name.startswith(incomplete)]
        return names + click.Command.shell_complete(self, ctx, incomplete)

    def invoke(self, ctx: click.Context) -> Any:
        with progress.warnings_to_log():
            return super().invoke(ctx)


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="perfcheck")
@click.option("--log", "log_file", type=click.Path(dir_okay=False, allow_dash=True),
              default=None, help="Append the log (one line per stage with its duration, "
              "warnings) to this file; '-' for stderr. Without it warnings are dropped.")
def main(log_file: str | None) -> None:
    """Check a grid-connected PV system against what its design and weather say it should
    deliver, from the site's own logger files.

    Progress is drawn on stderr when it is a terminal; everything else on stderr is an error
    or, for `monthly`, its one-paragraph verdict.

    \b
    Example:
      perfcheck demo --out demo_out
    """
    progress.setup_logging(Path(log_file) if log_file not in (None, "-") else None,
                           verbose=log_file == "-")
