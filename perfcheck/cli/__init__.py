"""The command line: a thin shell over the stages.

Each module in this package holds the commands of one stage and lists them in ``COMMANDS``;
they are gathered here, so adding a command means adding it to its stage's module.
"""

from __future__ import annotations

import importlib
import pkgutil

import click

from perfcheck import __version__


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="perfcheck")
def main() -> None:
    """Check a grid-connected PV system against what its design and weather say it should
    deliver, from the site's own logger files.

    \b
    Example:
      perfcheck demo --out demo_out
    """


for _info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
    if _info.name == "common":
        continue
    for _cmd in importlib.import_module(f"{__name__}.{_info.name}").COMMANDS:
        main.add_command(_cmd)
