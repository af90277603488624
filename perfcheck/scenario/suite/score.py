"""Score a plant's check document against its truth.json, and the suite against the targets.

Pure functions over the two JSON documents. Matching: a truth fault is *found* when at least
one event has its kind and scope and overlaps its window (several such events are taken
together: first start, last end, energies and bands summed). Degradation is found when the
check reports a rate. Truth entries with ``design: true`` (natural clipping, a design export
limit) are not faults: events matching them are neither scored nor false. Every event that
matches no truth entry is a *false event*.

Measures per fault: window error [days] (the larger of the start and end differences; for
shading only the start, which the truth puts on the first day the loss exceeds 1 % of the
inverter's daily energy), energy error [% of the truth], coverage (the truth energy inside the
event's 95 % band), for soiling the error in percentage points of the clean energy. Per plant:
degradation rate error [%/yr] and coverage; PR error [%, relative] and coverage on healthy
months (months that no fault other than degradation touches).

The targets are those of item 2 of the project's issue 11, and of issue 14 for trackers:
stalls and rows out of step are scored as the other faults, and wind stow (design) reported
as a fault (a false event of a fault kind lying mostly in a stow of the truth) is counted
apart.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

DAY_S = 86400.0


def ts(text: str) -> pd.Timestamp:
    """An ISO 8601 time with offset as a UTC timestamp."""
    return pd.Timestamp(text).tz_convert("UTC")


def overlaps(a: dict, b: dict) -> bool:
    """True when the windows [start, end) of two records overlap (an instant counts)."""
    return ts(a["start"]) <= ts(b["end"]) and ts(b["start"]) <= ts(a["end"])


def _kind(e: dict) -> tuple[str, bool]:
    """(kind, design) of an event: clipping at the rating is its own kind in the check; wind
    stow is design by kind."""
    if e["kind"] == "design_clipping":
        return "clipping", True
    return e["kind"], bool(e.get("design")) or e["kind"] == "wind_stow"


def matching(fault: dict, events: list[dict]) -> list[int]:
    """Indices of the events with the fault's kind and scope that overlap its window (a
    design entry matches only events the check marks as design, a fault only the others)."""
    want = (fault["kind"], bool(fault.get("design")))
    return [i for i, e in enumerate(events) if _kind(e) == want
            and e["scope"] == fault["scope"] and overlaps(fault, e)]


def _pct(found: float, truth: float) -> float | None:
    return None if truth <= 0 else 100.0 * (found - truth) / truth


def score_fault(fault: dict, events: list[dict], degradation: dict) -> dict[str, Any]:
    """One truth fault against the events (or, for degradation, the reported rate)."""
    row: dict[str, Any] = {"kind": fault["kind"], "scope": fault["scope"],
                           "mode": fault["parameters"].get("mode"), "found": False,
                           "window_error_days": None, "energy_error_pct": None,
                           "covered": None, "soiling_error_pp": None, "rate_error": None}
    if fault["kind"] == "degradation":
        rate, truth = degradation.get("rate_pct_per_year"), fault["parameters"]["rate_pct_per_year"]
        if rate is not None:
            row.update(found=True, rate_error=rate - truth,
                       covered=degradation["ci_low"] <= truth <= degradation["ci_high"])
        return row
    hits = [events[i] for i in matching(fault, events)]
    if not hits:
        return row
    start = min(ts(e["start"]) for e in hits)
    end = max(ts(e["end"]) for e in hits)
    d_start = abs((start - ts(fault["start"])).total_seconds()) / DAY_S
    d_end = abs((end - ts(fault["end"])).total_seconds()) / DAY_S
    row.update(found=True, window_error_days=d_start if fault["kind"] == "shading"
               else max(d_start, d_end))
    truth = fault["energy_loss_kwh"]
    if truth > 0:
        found = sum(e["energy_loss_kwh"] for e in hits)
        low = sum(e["energy_loss_kwh_low"] for e in hits)
        high = sum(e["energy_loss_kwh_high"] for e in hits)
        row.update(energy_error_pct=_pct(found, truth), covered=low <= truth <= high)
        share = fault["parameters"].get("loss_pct_of_clean")
        if fault["kind"] == "soiling" and share:
            row["soiling_error_pp"] = (found - truth) / (100.0 * truth / share) * 100.0
    return row


def healthy_months(truth: dict) -> set[str]:
    """Months (YYYY-MM, site-local) that no fault other than degradation touches."""
    months = {m["month"] for m in truth["monthly"]}
    sick = set()
    for f in truth["faults"]:
        if f.get("design") or f["kind"] == "degradation":
            continue
        first, last = (pd.Timestamp(f[k][:10]) for k in ("start", "end"))
        sick |= {p.strftime("%Y-%m") for p in pd.period_range(first, last, freq="M")}
    return months - sick


def score_pr(truth: dict, doc: dict) -> list[dict[str, Any]]:
    """Relative PR error [%] and coverage on the healthy months."""
    true_pr = {m["month"]: m["pr"] for m in truth["monthly"]}
    out = []
    for m in doc["metrics"]["monthly"]:
        if m["month"] not in healthy_months(truth) or m.get("pr") is None:
            continue
        t = true_pr[m["month"]]
        lo, hi = m.get("pr_ci_low"), m.get("pr_ci_high")
        out.append({"month": m["month"], "pr_error_pct": 100.0 * (m["pr"] - t) / t,
                    "covered": None if lo is None or hi is None else lo <= t <= hi})
    return out


IRRADIANCE = {True: "in-plane sensor", False: "GHI only"}


def score_plant(truth: dict, doc: dict) -> dict[str, Any]:
    """Every truth fault scored, the false events, the PR on healthy months."""
    events = doc["events"]
    faults = [f for f in truth["faults"] if not f.get("design")]
    rows = [score_fault(f, events, doc.get("degradation") or {}) for f in faults]
    used = {i for f in truth["faults"] for i in matching(f, events)}
    false = [{"kind": e["kind"], "scope": e["scope"], "start": e["start"], "end": e["end"],
              "energy_loss_kwh": e["energy_loss_kwh"]}
             for i, e in enumerate(events) if i not in used]
    return {"plant": truth["scenario"].get("suite_plant"), "fault_free": not faults,
            "faults": rows, "false_events": false, "pr": score_pr(truth, doc),
            "irradiance": IRRADIANCE[bool(truth["scenario"].get("has_poa_sensor"))],
            "stow_called_fault": stow_called_fault(truth, false)}


def stow_called_fault(truth: dict, false: list[dict]) -> list[dict]:
    """The false events (a fault kind, matching no truth fault) that lie for at least half
    their length in the truth's wind stow: designed behaviour reported as a fault."""
    stows = [f for f in truth["faults"] if f["kind"] == "wind_stow"]

    def inside_s(e: dict) -> float:
        return sum(max(0.0, (min(ts(e["end"]), ts(f["end"]))
                             - max(ts(e["start"]), ts(f["start"]))).total_seconds())
                   for f in stows)

    return [e for e in false if not _kind(e)[1]
            and inside_s(e) >= 0.5 * (ts(e["end"]) - ts(e["start"])).total_seconds()]


# --------------------------------------------------------------------------------------------
# the suite


def _median(xs: list[float]) -> float | None:
    return float(np.median(xs)) if xs else None


def kind_table(plants: list[dict]) -> list[dict[str, Any]]:
    """Per fault kind: injected, found, median window and |energy| errors, coverage, false."""
    rows = [r for p in plants for r in p["faults"]]
    false = [e for p in plants for e in p["false_events"]]
    free = [e for p in plants if p["fault_free"] for e in p["false_events"]]
    kinds = sorted({r["kind"] for r in rows} | {e["kind"] for e in false})
    out = []
    for k in kinds:
        mine = [r for r in rows if r["kind"] == k]
        hit = [r for r in mine if r["found"]]
        cov = [r["covered"] for r in hit if r["covered"] is not None]
        out.append({
            "kind": k, "injected": len(mine), "found": len(hit),
            "window_error_days": _median([r["window_error_days"] for r in hit
                                          if r["window_error_days"] is not None]),
            "energy_error_pct": _median([abs(r["energy_error_pct"]) for r in hit
                                         if r["energy_error_pct"] is not None]),
            "covered": f"{sum(cov)}/{len(cov)}" if cov else "-",
            "false": sum(e["kind"] == k for e in false),
            "false_fault_free": sum(e["kind"] == k for e in free),
        })
    return out


@dataclass(frozen=True)
class Target:
    name: str
    value: str
    passed: bool | None  # None: nothing to judge (no such fault in the suite)


def _share(flags: list[bool]) -> tuple[str, float | None]:
    if not flags:
        return "n/a", None
    return f"{sum(flags)}/{len(flags)}", sum(flags) / len(flags)


def _all(name: str, flags: list[bool], need: float = 1.0) -> Target:
    text, share = _share(flags)
    return Target(name, text, None if share is None else share >= need - 1e-12)


def targets(plants: list[dict]) -> list[Target]:
    """The targets of issue 11 item 2, each judged on the scored plants."""
    rows = [r for p in plants for r in p["faults"]]
    hit = [r for r in rows if r["found"]]

    def of(*kinds: str) -> list[dict]:
        return [r for r in hit if r["kind"] in kinds]

    timed = [r for r in hit if r["kind"] not in ("degradation", "shading")]
    energy = [r for r in hit if r["energy_error_pct"] is not None
              and r["kind"] not in ("clipping", "soiling")]
    fault_free = [e for p in plants if p["fault_free"] for e in p["false_events"]
                  if e["kind"] in ("outage", "partial_outage")]
    months = [m for p in plants for m in p["pr"]]
    return [
        _all("faults found with the right kind and scope (>= 90 %)",
             [r["found"] for r in rows], 0.9),
        _all("windows within 1 day", [r["window_error_days"] <= 1.0 for r in timed]),
        _all("shading found within 30 days of its 1 % day",
             [r["window_error_days"] <= 30.0 for r in of("shading")]),
        _all("energy within 20 % per event", [abs(r["energy_error_pct"]) <= 20 for r in energy]),
        _all("degradation within +-0.3 %/yr",
             [abs(r["rate_error"]) <= 0.3 for r in of("degradation")]),
        _all("soiling loss within 1 percentage point",
             [abs(r["soiling_error_pp"]) <= 1.0 for r in of("soiling")
              if r["soiling_error_pp"] is not None]),
        _all("clipping (derate) energy within 10 %",
             [abs(r["energy_error_pct"]) <= 10 for r in of("clipping")
              if r["energy_error_pct"] is not None]),
        Target("no false outage or string fault on a fault-free plant",
               f"{len(fault_free)} false", not fault_free),
        _all("PR within +-1 % on healthy months", [abs(m["pr_error_pct"]) <= 1.0
                                                   for m in months]),
        _all("degradation interval covers the truth (>= 90 %)",
             [r["covered"] for r in of("degradation")], 0.9),
        _all("event energy interval covers the truth (>= 90 %)",
             [r["covered"] for r in hit if r["kind"] != "degradation"
              and r["covered"] is not None], 0.9),
        _all("PR interval covers the truth on healthy months (>= 90 %)",
             [m["covered"] for m in months if m["covered"] is not None], 0.9),
        _all("irradiance-sensor faults found", [r["found"] for r in rows
                                                if r["kind"] == "sensor_fault"]),
        _all("missed daylight-saving changes found",
             [r["found"] for r in rows if r["kind"] == "clock_fault"
              and r["mode"] == "missed_dst"]),
        _all("export limiting found on every day", [r["found"] for r in rows
                                                    if r["kind"] == "curtailment"]),
        _all("tracker stalls and rows out of step found (>= 90 %)",
             [r["found"] for r in rows if r["kind"].startswith("tracker_")], 0.9),
        Target("wind stow never reported as a fault",
               f"{sum(len(p.get('stow_called_fault', [])) for p in plants)} times",
               not any(p.get("stow_called_fault") for p in plants)),
    ]


def _fmt(x: Any, spec: str = ".1f") -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    return format(x, spec) if isinstance(x, float) else str(x)


def _pr_by_input(plants: list[dict]) -> dict[str, list[bool]]:
    """Healthy months within +-1 % per irradiance input of the plant (a reference irradiance
    measured in the plane of the array, or modelled from GHI: the decomposition's monthly
    error is of the order of a few per cent)."""
    out: dict[str, list[bool]] = {}
    for p in plants:
        out.setdefault(p.get("irradiance", "unknown"), []).extend(
            abs(m["pr_error_pct"]) <= 1.0 for m in p["pr"])
    return out


def format_report(plants: list[dict]) -> str:
    """The per-kind table and the targets with PASS/FAIL, as printed by the suite script."""
    head = (f"{'kind':<17}{'injected':>9}{'found':>7}{'win err d':>11}{'|E err| %':>11}"
            f"{'covered':>9}{'false':>7}{'false (fault-free)':>20}")
    lines = [f"{len(plants)} plants, {sum(p['fault_free'] for p in plants)} fault-free; "
             "medians over the found faults", "", head]
    for r in kind_table(plants):
        lines.append(f"{r['kind']:<17}{r['injected']:>9}{r['found']:>7}"
                     f"{_fmt(r['window_error_days']):>11}{_fmt(r['energy_error_pct']):>11}"
                     f"{r['covered']:>9}{r['false']:>7}{r['false_fault_free']:>20}")
    rates = [r["rate_error"] for p in plants for r in p["faults"] if r["rate_error"] is not None]
    months = [m["pr_error_pct"] for p in plants for m in p["pr"]]
    lines += ["", f"degradation rate error [%/yr]: {', '.join(f'{x:+.2f}' for x in rates) or '-'}",
              f"PR error on healthy months [%]: median |e| {_fmt(_median(np.abs(months).tolist()))}"
              f", max |e| {_fmt(float(np.max(np.abs(months))) if months else None)}"
              f" ({len(months)} months); within +-1 % by irradiance input: "
              + ", ".join(f"{k} {_share(v)[0]}" for k, v in _pr_by_input(plants).items()),
              "", "targets (issue 11, item 2):"]
    for t in targets(plants):
        verdict = {True: "PASS", False: "FAIL", None: "n/a "}[t.passed]
        lines.append(f"  {verdict}  {t.name}: {t.value}")
    return "\n".join(lines)
