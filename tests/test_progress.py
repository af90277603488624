"""Progress bars only on a terminal and without --quiet; logging to a file."""

from __future__ import annotations

import io
import logging

from perfcheck import progress


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_no_bar_without_terminal_or_with_quiet():
    assert not progress.bars_enabled(False, io.StringIO())  # cron: stderr is not a terminal
    assert not progress.bars_enabled(True, Terminal())  # --quiet
    assert progress.bars_enabled(False, Terminal())
    out = io.StringIO()
    with progress.Bar("ingest", 3, enabled=False, stream=out) as b:
        b.step("a.csv")
    assert out.getvalue() == ""


def test_bar_on_terminal():
    out = Terminal()
    with progress.Bar("ingest", 2, enabled=True, stream=out, width=4) as b:
        b.step("a.csv")
        b.step("b.csv")
    text = out.getvalue()
    assert "\ringest [##..] 1/2 a.csv" in text and "\ringest [####] 2/2 b.csv" in text
    assert text.endswith("\r")  # the line is cleared at the end


def test_logging_to_file(tmp_path):
    log = progress.setup_logging(tmp_path / "logs" / "job.log")
    logging.getLogger("perfcheck.monthly").info("hello %s", "file")
    for h in log.handlers:
        h.flush()
    assert "INFO perfcheck.monthly: hello file" in (tmp_path / "logs" / "job.log").read_text()
    progress.setup_logging(None)  # handlers replaced, the file closed
