"""The monthly job for cron: new inbox files in, last complete month out, loud only on trouble.

``run_monthly`` takes the lock, ingests the inbox files not seen before (a file that cannot
be read, or that no logger matches, is logged and left in the inbox), runs the model,
checks the month, writes report, JSON and CSV into ``<out_dir>/<YYYY-MM>/`` (replacing the
folder on a re-run), records the month in the ``history`` table (one row per month) and the
run in ``runs``, and compares the month with the previous ones.

Exit codes (``EXIT_*``): 0 healthy; 1 underperformance (EPI below 1 - threshold, or too little
data for a verdict, or no data at all: then no history row is written and the summary names
the feeds that stopped); 3 a critical event (default: any outage); 2 input or configuration error;
4 another run holds the lock, or another process the database, for longer than the wait
(``[report] lock_wait_s``).
"""

from __future__ import annotations

import datetime as dt
import fcntl
import glob
import hashlib
import logging
import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import duckdb
import pandas as pd

from perfcheck import __version__, atomic, db, ingest, kinds, periods, pipeline, report
from perfcheck.errors import DatabaseBusy, LoggerFileError, PerfcheckError, SiteFileError
from perfcheck.site import Site, name_matches

EXIT_HEALTHY, EXIT_UNDERPERFORMANCE, EXIT_INPUT, EXIT_CRITICAL, EXIT_BUSY = 0, 1, 2, 3, 4
TREND_MONTHS = 12
log = logging.getLogger("perfcheck.monthly")


class LockBusy(PerfcheckError):
    """Another monthly run holds the site's lock for longer than we may wait."""


@contextmanager
def lock(path: Path, wait_s: float, poll_s: float = 0.2) -> Iterator[None]:
    """An exclusive lock on ``path`` (flock); waits up to ``wait_s``, then raises LockBusy."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fh = open(path, "a+", encoding="utf-8")  # noqa: SIM115 - held for the whole block
    deadline = time.monotonic() + wait_s
    try:
        while True:
            try:
                fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    fh.seek(0)
                    holder = fh.read().strip() or "unknown process"
                    raise LockBusy(f"{path}: another perfcheck monthly run holds the lock "
                                   f"({holder}); gave up after {wait_s:g} s") from None
                time.sleep(poll_s)
        fh.seek(0)
        fh.truncate()
        fh.write(f"pid {os.getpid()} since {dt.datetime.now(dt.UTC):%Y-%m-%d %H:%M:%S} UTC\n")
        fh.flush()
        yield
    finally:
        fh.close()  # closing releases the lock


@dataclass
class Outcome:
    month: str
    exit_code: int
    status: str
    summary: str
    out_dir: Path | None = None
    new_files: list[str] = field(default_factory=list)
    skipped: list[str] = field(default_factory=list)  # one line per unreadable inbox file


def inbox_files(site: Site) -> list[Path]:
    """Files matching ``site.inbox`` (a glob, relative to the site file's folder) that one of
    the site's loggers reads (by its ``match`` glob), sorted; other files are logged and left."""
    if not site.inbox:
        raise SiteFileError(f"{site.path}: site.inbox: not set; the monthly job needs the glob of "
                            "the folder where new logger files arrive, e.g. \"inbox/*.csv\"")
    pattern = site.inbox if Path(site.inbox).is_absolute() else str(site.path.parent / site.inbox)
    if Path(pattern).is_dir():
        pattern = str(Path(pattern) / "*")
    found = sorted(Path(p) for p in glob.glob(pattern, recursive=True) if Path(p).is_file())
    readable = [p for p in found if any(name_matches(p.name, lg.match) for lg in site.loggers)]
    for p in sorted(set(found) - set(readable)):
        log.warning("%s: no [[loggers]] entry matches this file name; left in the inbox", p)
    return readable


def new_files(con: duckdb.DuckDBPyConnection, site: Site, candidates: list[Path]
              ) -> tuple[list[Path], list[str]]:
    """The candidates not ingested before (by sha256) that pass the ingest's whole-file
    checks, and one line per file skipped because it cannot be read (logged; the file is left
    in the inbox and tried again next run, so one half-written file blocks nothing)."""
    known = {r[0] for r in con.execute(db.sql("monthly_known_files")).fetchall()}
    fresh, skipped = [], []
    for p in candidates:
        try:
            if hashlib.sha256(p.read_bytes()).hexdigest() in known:
                continue
            ingest.check_file(site, p)
        except OSError as exc:
            skipped.append(f"{p}: cannot read file ({exc.strerror})")
        except LoggerFileError as exc:
            skipped.append(str(exc))
        else:
            fresh.append(p)
            continue
        log.warning("%s; skipped, left in the inbox", skipped[-1])
    return fresh, skipped


def classify(result: dict, settings: report.ReportSettings) -> tuple[str, int, str]:
    """(status, exit code, reason) of a month's check result."""
    if report.no_data(result):
        return "no_data", EXIT_UNDERPERFORMANCE, "no data for the month"
    critical = [e for e in result.get("events", []) if e["kind"] in settings.critical_kinds]
    p = result["metrics"]["period"]
    limit = 1 - settings.underperformance_threshold_pct / 100
    if critical:
        e = critical[0]
        return "critical", EXIT_CRITICAL, (
            f"{len(critical)} critical event(s) ({', '.join(settings.critical_kinds)}), first: "
            f"{kinds.words(e['kind'])} on {report.scope_words(e['scope'])} from "
            f"{report.local_text(e['start'], result['site']['timezone'])} to "
            f"{report.local_text(e['end'], result['site']['timezone'])}")
    if p.get("epi") is None:
        return "no_verdict", EXIT_UNDERPERFORMANCE, (
            f"too little valid data for a verdict ({p.get('reason') or 'no EPI'})")
    if p["epi"] < limit:
        return "underperformance", EXIT_UNDERPERFORMANCE, (
            f"EPI {report.fmt_interval(p, 'epi')} is below {limit:.3f} "
            f"(report.underperformance_threshold_pct = "
            f"{settings.underperformance_threshold_pct:g})")
    return "healthy", EXIT_HEALTHY, f"EPI {report.fmt_interval(p, 'epi')} at or above {limit:.3f}"


def top_events(result: dict, n: int = 3) -> str:
    evs = sorted(result.get("events", []), key=lambda e: -(e.get("energy_loss_kwh") or 0))[:n]
    return "; ".join(f"{kinds.words(e['kind'])} on {report.scope_words(e['scope'])} "
                     f"{e.get('energy_loss_kwh') or 0:,.0f} kWh" for e in evs)


def trend(con: duckdb.DuckDBPyConnection, site: Site, month: str, epi: float | None) -> str:
    rows = con.execute(db.sql("monthly_history_before"),
                       {"site": site.name, "month": month, "n": TREND_MONTHS}).fetchall()
    past = [r[1] for r in rows if r[1] is not None]
    if not past:
        return "no earlier months in the history to compare with"
    mean = sum(past) / len(past)
    if epi is None:
        return f"mean EPI of the previous {len(past)} month(s) {mean:.3f}"
    word = "down" if epi < mean else "up"
    return (f"EPI {word} {abs(epi - mean):.3f} against the mean of the previous {len(past)} "
            f"month(s) ({mean:.3f}); last month {past[0]:.3f}")


def _write_month(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp,
                 end: pd.Timestamp, result: dict, target: Path) -> None:
    """Write the month's outputs into a fresh folder, then swap it in for ``target``."""
    with atomic.replacing_dir(target, replace=True) as tmp:
        report.write_report(con, site, start, end, tmp, result=result)


def run_monthly(site: Site, db_path: Path, month: str | None = None, out_root: Path | None = None,
                command: str = "perfcheck monthly", quiet: bool = True,
                now: pd.Timestamp | None = None) -> Outcome:
    """The whole monthly job (see the module docstring); raises PerfcheckError on bad input."""
    settings = report.report_settings(site)
    out_root = Path(out_root) if out_root else site.path.parent / settings.out_dir
    month = month or periods.last_complete_month(site, now)
    start, end = periods.month_period(site, month)
    with lock(Path(db_path).with_suffix(".monthly.lock"), settings.lock_wait_s):
        try:  # another command (an ingest, a report) may hold the database itself
            con = db.connect(db_path, wait_s=settings.lock_wait_s)
        except DatabaseBusy as exc:
            raise LockBusy(str(exc)) from None
        try:
            return _run_locked(con, site, month, start, end, out_root, settings, command, quiet)
        finally:
            con.close()


def _run_locked(con: duckdb.DuckDBPyConnection, site: Site, month: str, start: pd.Timestamp,
                end: pd.Timestamp, out_root: Path, settings: report.ReportSettings,
                command: str, quiet: bool) -> Outcome:
    started = dt.datetime.now(dt.UTC)
    run_id = con.execute(db.sql("monthly_run_insert"), {
        "command": command, "started_at": started, "tool_version": __version__}).fetchone()[0]
    log.info("run %s started: %s", run_id, command)
    fresh, skipped = new_files(con, site, inbox_files(site))
    log.info("%d new file(s) in the inbox", len(fresh))
    for p in fresh:
        log.info("ingest %s", p)
    pipeline.update(con, site, fresh, quiet=quiet)
    result = pipeline.view(con, site, start, end)
    status, code, reason = classify(result, settings)
    target = out_root / month
    _write_month(con, site, start, end, result, target)
    p = result["metrics"]["period"]
    the_trend = trend(con, site, month, p.get("epi"))
    if status == "no_data":  # the history holds months with data only
        log.warning("%s: no data; no history row written", month)
    else:
        _history(con, site, month, result, status, code, run_id)
    con.execute(db.sql("monthly_run_finish"), {
        "finished_at": dt.datetime.now(dt.UTC), "exit_code": code, "files_new": len(fresh),
        "out_dir": str(target), "run_id": run_id})
    feeds = report.db_quality(con, start, end)["feeds"]
    summary = (f"perfcheck monthly: {site.name}, {month}: {status.replace('_', ' ').upper()}. "
               f"{reason}. {report.verdict(result, site.timezone, feeds)} "
               f"{len(fresh)} new file(s) ingested"
               f"{f', {len(skipped)} skipped (unreadable, see the log)' if skipped else ''}. "
               f"Top events: {top_events(result) or 'none'}. "
               f"Trend: {the_trend}. Report: {target / 'report.html'}")
    log.info("run %s finished with exit code %d", run_id, code)
    log.info("%s", summary)
    return Outcome(month, code, status, summary, target, [str(f) for f in fresh], skipped)


def _history(con: duckdb.DuckDBPyConnection, site: Site, month: str, result: dict,
             status: str, code: int, run_id: int) -> None:
    """The month's row of the history table (replacing an earlier run's)."""
    p = result["metrics"]["period"]
    con.execute(db.sql("monthly_history_upsert"), {
        "site": site.name, "month": month, "measured_kwh": p.get("measured_kwh"),
        "expected_kwh": p.get("expected_kwh"), "epi": p.get("epi"),
        "epi_ci_low": p.get("epi_ci_low"), "epi_ci_high": p.get("epi_ci_high"),
        "pr": p.get("pr"), "pr_temp_corrected": p.get("pr_temp_corrected"),
        "availability": p.get("availability"), "coverage": p.get("coverage"),
        "top_events": top_events(result), "status": status, "exit_code": code,
        "run_id": run_id})
