"""Progress bars only on a terminal and without --quiet; logging to a file."""

from __future__ import annotations

import io
import logging
import time
import warnings

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


def test_stage_draws_on_a_terminal_and_logs_one_line(tmp_path):
    progress.setup_logging(tmp_path / "job.log")
    out = Terminal()
    with progress.Stage("check: metrics", enabled=True, stream=out, delay_s=0.0, every_s=0.01):
        time.sleep(0.1)
    text = out.getvalue()
    assert "\rcheck: metrics ... 0 s " in text and text.endswith("\r")  # drawn, then cleared
    quiet = io.StringIO()
    with progress.Stage("report", enabled=False, stream=quiet, delay_s=0.0):
        time.sleep(0.05)
    assert quiet.getvalue() == ""  # not a terminal: nothing drawn
    for h in logging.getLogger("perfcheck").handlers:
        h.flush()
    lines = (tmp_path / "job.log").read_text().splitlines()
    assert [line.split(" INFO ")[1].split(" done in ")[0] for line in lines] == [
        "perfcheck.progress: check: metrics:", "perfcheck.progress: report:"]
    progress.setup_logging(None)


def test_warnings_in_the_block_are_logged_not_printed(tmp_path, capsys):
    progress.setup_logging(tmp_path / "job.log")
    with progress.warnings_to_log():
        warnings.warn("an invented warning", RuntimeWarning, stacklevel=1)
    assert capsys.readouterr().err == ""
    for h in logging.getLogger("perfcheck").handlers:
        h.flush()
    assert "WARNING perfcheck.warnings: RuntimeWarning: an invented warning" in (
        tmp_path / "job.log").read_text()
    progress.setup_logging(None)
