"""Progress on a terminal, one log line per stage, and where log records and warnings go.

A bar or a stage line is drawn on stderr only when stderr is a terminal and the command was
not given ``--quiet``; otherwise drawing is a no-op, so library code can report progress
freely through the callbacks the stages accept (``ingest_files(progress=...)``,
``model.run(progress=...)``). Every bar and stage also writes one line with its duration to
the ``perfcheck.progress`` logger, which reaches the log file when there is one.

Warnings (numpy, pandas, matplotlib) and other libraries' log records never go raw to
stderr, where cron would mail them: :func:`setup_logging` sends them to the same handlers as
the ``perfcheck`` logger, or nowhere when there is no log.
"""

from __future__ import annotations

import logging
import sys
import threading
import time
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any, TextIO

LOG_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"
log = logging.getLogger("perfcheck.progress")
# When a bar last drew: a stage around it (the monthly job) leaves the line to the bar.
_bar_drawn_at = 0.0


class Bar:
    """A one-line text bar: ``label [#####.....] 5/10 file.csv``."""

    def __init__(self, label: str, total: int | None, enabled: bool, stream: TextIO | None = None,
                 width: int = 28):
        self.label, self.total, self.enabled = label, total, enabled
        self.stream = stream or sys.stderr
        self.width, self.done, self._last = width, 0, 0.0
        self._started = time.monotonic()

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
        global _bar_drawn_at
        self._last = _bar_drawn_at = now
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
        log.info("%s: %d step(s) in %.1f s", self.label, self.done,
                 time.monotonic() - self._started)

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


class Stage:
    """One step of a command that may take a while: on a terminal, ``label ... 12 s`` redrawn
    on stderr while it runs (after half a second, then cleared); then one log line with its
    duration."""

    def __init__(self, label: str, enabled: bool, stream: TextIO | None = None,
                 delay_s: float = 0.5, every_s: float = 0.25):
        self.label, self.enabled = label, enabled
        self.stream = stream or sys.stderr
        self.delay_s, self.every_s = delay_s, every_s
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._draw, daemon=True)
        self._drawn = False
        self._started = time.monotonic()

    def _draw(self) -> None:
        if self._stop.wait(self.delay_s):
            return
        shown = ""
        while True:
            now = time.monotonic()
            text = f"\r{self.label} ... {now - self._started:.0f} s "
            if now - _bar_drawn_at <= 2 * self.every_s:
                shown = ""  # a bar has the line; draw again once it is done
            elif text != shown:
                self.stream.write(text)
                self.stream.flush()
                shown, self._drawn = text, True
            if self._stop.wait(self.every_s):
                return

    def __enter__(self) -> Stage:
        self._started = time.monotonic()
        if self.enabled:
            self._thread.start()
        return self

    def __exit__(self, exc_type: object, *exc: object) -> None:
        if self.enabled:
            self._stop.set()
            self._thread.join()
            if self._drawn:
                self.stream.write("\r" + " " * (len(self.label) + 16) + "\r")
                self.stream.flush()
        took = time.monotonic() - self._started
        if exc_type is None:
            log.info("%s: done in %.1f s", self.label, took)
        else:
            log.info("%s: stopped after %.1f s", self.label, took)


def stage(label: str, quiet: bool = False) -> Stage:
    """A :class:`Stage` drawn only on a terminal and without ``--quiet``."""
    return Stage(label, bars_enabled(quiet))


class _Stderr(logging.StreamHandler):
    """A handler that writes to the current ``sys.stderr`` (which tests and click swap)."""

    def emit(self, record: logging.LogRecord) -> None:
        self.stream = sys.stderr
        super().emit(record)


def _log_warning(message: Warning | str, category: type[Warning], filename: str, lineno: int,
                 file: TextIO | None = None, line: str | None = None) -> None:
    """``warnings.showwarning`` replaced: a warning becomes one record of the log."""
    logging.getLogger("perfcheck.warnings").warning("%s: %s (%s, line %d)", category.__name__,
                                                    message, filename, lineno)


@contextmanager
def warnings_to_log() -> Iterator[None]:
    """Within the block every warning is logged (see :func:`setup_logging`), never printed."""
    shown = warnings.showwarning
    warnings.showwarning = _log_warning
    try:
        yield
    finally:
        warnings.showwarning = shown


def setup_logging(log_file: Path | None = None, verbose: bool = False) -> logging.Logger:
    """The ``perfcheck`` logger: to ``log_file`` (appending) at INFO, and to stderr with
    ``verbose``; other libraries' records at WARNING go to the same places. With neither,
    everything is dropped (nothing reaches stderr). Handlers set up by an earlier call are
    replaced."""
    handlers: list[logging.Handler] = []
    if log_file is not None:
        Path(log_file).parent.mkdir(parents=True, exist_ok=True)
        fh = logging.FileHandler(log_file, encoding="utf-8")
        fh.setFormatter(logging.Formatter(LOG_FORMAT))
        handlers.append(fh)
    if verbose:
        sh = _Stderr()
        sh.setFormatter(logging.Formatter("%(message)s"))
        handlers.append(sh)
    handlers = handlers or [logging.NullHandler()]
    for h in handlers:
        h.perfcheck = True  # type: ignore[attr-defined]  # ours, to be replaced next time
    pc, root = logging.getLogger("perfcheck"), logging.getLogger()
    for logger in (pc, root):  # the root keeps handlers others set (pytest's, for one)
        for h in [h for h in logger.handlers if getattr(h, "perfcheck", False)]:
            logger.removeHandler(h)
            h.close()
        for h in handlers:
            logger.addHandler(h)
    pc.setLevel(logging.INFO)
    pc.propagate = False
    return pc
