"""In-process benchmark of detection: every detector over a 1-minute site-year with 4 inverters.

The aligned rows (2.1 million: 525,600 intervals x 4 inverters) come from the synthetic plant
of ``tests/detect_synth.py`` with a few faults injected; making them is not timed. Timed:
``perfcheck.detect.analyse`` (all detectors, corrections and the attribution) on the rows in
memory, i.e. after the expected series exists. Target: <= 10 s on the project machine; the
figure per detector is printed. Run: ``python tests/bench_detect.py``
(in-process, one library call; the whole commands are timed by ``tests/benchmark.py``).
"""

from __future__ import annotations

import time
from collections.abc import Callable

from detect_synth import make_aligned, make_site

from perfcheck import detect

TARGET_S = 10.0


def bench(print_row: Callable[[str, str], None]) -> None:
    site = make_site(n_inverters=4, strings=8)
    t0 = time.perf_counter()
    df = make_aligned(site, start="2024-01-01", days=365, freq_min=1, faults=[
        {"kind": "outage", "inverter": "INV2", "start": "2024-04-18 10:00",
         "end": "2024-04-19 16:00"},
        {"kind": "partial", "inverter": "INV1", "start": "2024-09-02 11:00",
         "end": "2024-09-23 14:00", "share": 0.25},
        {"kind": "curtail", "start": "2024-05-14 09:00", "end": "2024-05-14 17:00",
         "fraction": 0.6},
        {"kind": "soiling", "rate_per_day": 0.002,
         "cleanings": [f"2024-{m:02d}-01" for m in range(1, 13)]},
    ])
    print_row("detect: setup (not timed)",
              f"{len(df):,} aligned rows in {time.perf_counter() - t0:.1f} s")
    best, timings = float("inf"), {}
    for _ in range(3):
        lap: dict[str, float] = {}
        t0 = time.perf_counter()
        result = detect.analyse(df, site, timings=lap)
        took = time.perf_counter() - t0
        if took < best:
            best, timings = took, lap
    for name, seconds in timings.items():
        print_row(f"detect: {name}", f"{seconds:.2f} s")
    print_row("detect: all detectors, site-year",
              f"{best:.2f} s best of 3 ({len(result['events'])} events)")
    print_row("detect: ratio to target", f"{best / TARGET_S:.2f} (target <= 1.0, {TARGET_S} s)")


if __name__ == "__main__":
    bench(lambda label, value: print(f"{label:<40} {value}", flush=True))
