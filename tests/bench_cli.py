"""Benchmark section "cli" for ``tests/benchmark.py``: start-up time of the command line.

``perfcheck --version``, ``perfcheck --help``, ``perfcheck check --help`` and a TAB of shell
completion (a command name, an option of ``check``), each a fresh ``python -m perfcheck``
process, best of ten (the machine may be shared), beside a bare ``python -c pass`` measured in
the same run. Target: under 0.3 s each.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from collections.abc import Callable

RUNS = 10


def completing(words: str) -> dict[str, str]:
    """The environment in which click completes the last of ``words`` for bash."""
    return {"_PERFCHECK_COMPLETE": "bash_complete", "COMP_WORDS": words,
            "COMP_CWORD": str(len(words.split()) - 1)}


def best_of(args: list[str], env: dict[str, str] | None = None) -> float:
    """The fastest of ``RUNS`` runs of ``args`` in seconds."""
    times = []
    for _ in range(RUNS):
        t0 = time.perf_counter()
        subprocess.run(args, env={**os.environ, **(env or {})}, stdout=subprocess.DEVNULL,
                       check=False)
        times.append(time.perf_counter() - t0)
    return min(times)


def bench(print_row: Callable[[str, str], None]) -> None:
    cli = [sys.executable, "-m", "perfcheck"]
    print_row("cli: bare python -c pass", f"{best_of([sys.executable, '-c', 'pass']):.3f} s")
    for label, args, env in (("--version", ["--version"], None), ("--help", ["--help"], None),
                             ("check --help", ["check", "--help"], None),
                             ("completion of 'perfcheck c'", [], completing("perfcheck c")),
                             ("completion of 'perfcheck check --'", [],
                              completing("perfcheck check --"))):
        print_row(f"cli: {label}", f"{best_of(cli + args, env):.3f} s (target < 0.3 s, best of "
                  f"{RUNS})")
