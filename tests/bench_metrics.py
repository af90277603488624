"""In-process benchmark of the monthly metrics and bootstrap intervals for a 1-minute site-year.

Four inverters, 525,600 intervals each (2.1 million aligned rows) in an in-memory database, the
expected series already there. Timed: ``perfcheck.metrics.compute`` (the DuckDB pass over the
aligned view, daily, monthly, yearly and period summaries, 1000 day-block resamples each).
Target: <= 3 s on the project machine. Run: ``python tests/bench_metrics.py``
(in-process, one library call; the whole commands are timed by ``tests/benchmark.py``).
"""

from __future__ import annotations

import time
from collections.abc import Callable

from metrics_support import connect_with, make_site, synthetic_aligned

from perfcheck import metrics

TARGET_S = 3.0


def bench(print_row: Callable[[str, str], None]) -> None:
    site = make_site(n_inverters=4)
    t0 = time.perf_counter()
    frame = synthetic_aligned(site, "2025-01-01", "2026-01-01", freq="1min")
    con = connect_with(frame)
    print_row("metrics: setup (not timed)",
              f"{len(frame):,} aligned rows in {time.perf_counter() - t0:.1f} s")
    start, end = metrics.resolve_period(con, site, None, None)
    best = float("inf")
    for _ in range(3):
        t0 = time.perf_counter()
        result = metrics.period(con, site, start, end)
        best = min(best, time.perf_counter() - t0)
    m = result["metrics"]
    print_row("metrics: monthly + bootstrap, site-year",
              f"{best:.2f} s best of 3 ({len(m['monthly'])} months, {len(m['daily'])} days, "
              f"5 scopes, {metrics.load_settings(site).bootstrap_samples} resamples)")
    print_row("metrics: ratio to target", f"{best / TARGET_S:.2f} (target <= 1.0, {TARGET_S} s)")


if __name__ == "__main__":
    bench(lambda label, value: print(f"{label:<40} {value}", flush=True))
