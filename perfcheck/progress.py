"""Progress bars on a terminal, none under cron or ``--quiet``; logging set-up for the commands.

A bar is drawn on stderr only when stderr is a terminal and the command was not given
``--quiet``; otherwise every call is a no-op, so library code can report progress freely
through the callbacks the stages accept (``ingest_files(progress=...)``,
``model.run(progress=...)``).
"""

from __future__ import annotations

import logging
import sys
import time
from pathlib import Path
from typing import Any, TextIO

LOG_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"


class Bar:
    """A one-line text bar: ``label [#####.....] 5/10 file.csv``."""

    def __init__(self, label: str, total: int | None, enabled: bool, stream: TextIO | None = None,
                 width: int = 28):
        self.label, self.total, self.enabled = label, total, enabled
        self.stream = stream or sys.stderr
        self.width, self.done, self._last = width, 0, 0.0

    def step(self, note: Any = "", n: int = 1) -> None:
        """Advance by ``n`` and show ``note`` (a file name, a stage)."""
        self.done += n
        self.show(str(note))

    def show(self, note: str = "") -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last < 0.1 and (self.total is None or self.done < self.total):
            return
        self._last = now
        if self.total:
            k = round(self.width * min(self.done, self.total) / self.total)
            bar = f"[{'#' * k}{'.' * (self.width - k)}] {self.done}/{self.total}"
        else:
            bar = f"[{self.done}]"
        self.stream.write(f"\r{self.label} {bar} {note[:40]:<40}")
        self.stream.flush()

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\r" + " " * (len(self.label) + self.width + 60) + "\r")
            self.stream.flush()

    def __enter__(self) -> Bar:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def bars_enabled(quiet: bool, stream: TextIO | None = None) -> bool:
    """Bars only on a terminal and without ``--quiet``."""
    stream = stream or sys.stderr
    return not quiet and hasattr(stream, "isatty") and stream.isatty()


def bar(label: str, total: int | None = None, quiet: bool = False) -> Bar:
    return Bar(label, total, bars_enabled(quiet))


def setup_logging(log_file: Path | None = None, verbose: bool = False) -> logging.Logger:
    """The ``perfcheck`` logger: to ``log_file`` (appending) at INFO, and to stderr with
    ``verbose``. Handlers set up by an earlier call are replaced."""
    log = logging.getLogger("perfcheck")
    for h in list(log.handlers):
        log.removeHandler(h)
        h.close()
    log.setLevel(logging.INFO)
    log.propagate = False
    if log_file is not None:
        Path(log_file).parent.mkdir(parents=True, exist_ok=True)
        fh = logging.FileHandler(log_file, encoding="utf-8")
        fh.setFormatter(logging.Formatter(LOG_FORMAT))
        log.addHandler(fh)
    if verbose:
        sh = logging.StreamHandler(sys.stderr)
        sh.setFormatter(logging.Formatter("%(message)s"))
        log.addHandler(sh)
    if not log.handlers:
        log.addHandler(logging.NullHandler())
    return log
