"""The truth of the demo: energy of every fault, daily energies per inverter.

The plant is run once per stage of ATTRIBUTION_ORDER (stage 0: fault-free; stage k: the first k
faults on). The energy of fault k is the AC energy of stage k-1 minus that of stage k, so the
losses add up exactly to fault-free minus faulted energy and none is counted twice. Clipping at
the AC rating and the design export limit belong to the fault-free plant; they are listed with
``design: true`` and their energy (unlimited minus limited AC of the fault-free plant) is not
part of the sum; so is the trackers' wind stow (the energy of the plant whose trackers keep
tracking in high wind less that of the fault-free plant, per run of stow days).
"""

from __future__ import annotations

from dataclasses import replace
from typing import Any

import numpy as np
import pandas as pd

from perfcheck.scenario.faults import ATTRIBUTION_ORDER, Faults, entry, iso, local_ts, window
from perfcheck.scenario.plant import Physics, Plant, run_plant, soiling_recoveries
from perfcheck.site import Site


def daily_table(site: Site, times: pd.DatetimeIndex, runs: list[Plant], interval_min: int
                ) -> pd.DataFrame:
    """Per local day and inverter: clean, faulted and unlimited energy, loss per fault [kWh]."""
    kwh = interval_min / 60 / 1000
    local_day = np.asarray(times.tz_convert(site.tz).strftime("%Y-%m-%d"), dtype=object)
    frames = []
    for i, inv in enumerate(site.inverters):
        frame = pd.DataFrame({
            "date": local_day,
            "clean_energy_kwh": runs[0].ac[i] * kwh,
            "energy_kwh": runs[-1].ac[i] * kwh,
            "potential_energy_kwh": runs[0].ac_unlimited[i] * kwh,
            **{f"loss_{k}_kwh": (runs[j].ac[i] - runs[j + 1].ac[i]) * kwh
               for j, k in enumerate(ATTRIBUTION_ORDER)},
        })
        daily = frame.groupby("date", sort=True).sum()
        daily.insert(0, "inverter_id", inv.id)
        frames.append(daily.reset_index())
    return pd.concat(frames).sort_values(["date", "inverter_id"], kind="stable")


def _span(times: pd.DatetimeIndex, on: np.ndarray, tz: Any) -> tuple[str, str]:
    """First interval start and last interval end of the intervals where ``on``."""
    idx = np.flatnonzero(on)
    return iso(times[idx[0]], tz), iso(times[idx[-1]] + (times[1] - times[0]), tz)


def design_entries(site: Site, times: pd.DatetimeIndex, clean: Plant, interval_min: int
                   ) -> list[dict]:
    """Natural clipping per inverter and the design export limit (not faults)."""
    kwh, tz, out = interval_min / 60 / 1000, site.tz, []
    rating = np.array([[inv.ac_kw * 1000] for inv in site.inverters])
    clipped = clean.ac_unlimited - np.minimum(clean.ac_unlimited, rating)
    for i, inv in enumerate(site.inverters):
        on = clipped[i] > 1.0
        if on.any():
            start, end = _span(times, on, tz)
            out.append({"kind": "clipping", "scope": f"inverter:{inv.id}", "design": True,
                        "start": start, "end": end,
                        "energy_loss_kwh": round(float(clipped[i].sum() * kwh), 3),
                        "parameters": {"ac_kw": inv.ac_kw,
                                       "dc_ac_ratio": round(inv.dc_kwp / inv.ac_kw, 3),
                                       "intervals": int(on.sum()),
                                       "note": "natural clipping at the AC rating (design "
                                               "fact); unlimited minus limited AC"}})
    export = np.minimum(clean.ac_unlimited, rating).sum(axis=0) - clean.ac.sum(axis=0)
    on = export > 1.0
    if on.any():
        start, end = _span(times, on, tz)
        out.append({"kind": "curtailment", "scope": "plant", "design": True, "start": start,
                    "end": end, "energy_loss_kwh": round(float(export.sum() * kwh), 3),
                    "parameters": {"export_limit_kw": site.export_limit_kw,
                                   "intervals": int(on.sum()),
                                   "note": "the design's plant export limit, not a fault"}})
    return out


def stow_entries(site: Site, ph: Physics, faults: Faults, clean: Plant, interval_min: int
                 ) -> list[dict]:
    """The trackers' wind stow by daylight (design, not a fault): one entry per run of stow
    days (days one apart joined), with the energy the stow kept out of the fault-free plant."""
    if ph.stowed is None:
        return []
    tz, kwh = site.tz, interval_min / 60 / 1000
    tracking = run_plant(replace(ph, poa={**ph.poa, **ph.poa_unstowed}), faults, 0)
    # where the stow plane gets more light than the tracked one (overcast), nothing is kept
    kept = np.maximum(tracking.ac - clean.ac, 0.0).sum(axis=0)
    on = ph.stowed & (ph.weather.solpos["apparent_zenith"].to_numpy() < 90)
    day = np.asarray(ph.times.tz_convert(tz).normalize().tz_localize(None), dtype="datetime64[D]")
    limits = {a.tracker.stow_wind_speed_ms for inv in site.inverters for a in inv.arrays
              if a.tracker is not None}
    trackers = [inv.id for inv in site.inverters if any(a.tracker for a in inv.arrays)]
    # the plant when every inverter stows, else the one tracker inverter (as the detector)
    scope = "plant" if len(trackers) == len(site.inverters) else f"inverter:{trackers[0]}"
    runs: list[list] = []
    for d in np.unique(day[on]):
        if runs and d - runs[-1][1] <= np.timedelta64(2, "D"):
            runs[-1][1] = d
        else:
            runs.append([d, d])
    entries = []
    for first, last in runs:
        span = (day >= first) & (day <= last)
        start, end = _span(ph.times, on & span, tz)
        entries.append({"kind": "wind_stow", "scope": scope, "design": True, "start": start,
                        "end": end, "energy_loss_kwh": round(float(kept[span].sum() * kwh), 3),
                        "parameters": {"stow_wind_speed_ms": min(limits),
                                       "intervals": int((on & span).sum()),
                                       "note": "tracker rows laid flat in high wind: the "
                                               "tracker's design, not a fault; energy of the "
                                               "rows tracking on less the stowed rows', "
                                               "where positive"}})
    return entries


def fault_entries(site: Site, ph: Physics, faults: Faults, runs: list[Plant],
                  interval_min: int) -> list[dict]:
    """Truth entries of the energy faults, each with its attributed energy."""
    times, tz = ph.times, site.tz
    kwh = interval_min / 60 / 1000
    ids = [inv.id for inv in site.inverters]

    def loss(kind: str, mask: np.ndarray | None = None, inverter: str | None = None) -> np.ndarray:
        j = ATTRIBUTION_ORDER.index(kind)
        d = runs[j].ac - runs[j + 1].ac
        d = d if inverter is None else d[ids.index(inverter)][None, :]
        return d if mask is None else d[:, mask]

    def energy(kind: str, mask: np.ndarray | None = None, inverter: str | None = None) -> float:
        return float(loss(kind, mask, inverter).sum() * kwh)

    out = []
    start, end = iso(times[0], tz), iso(times[-1] + (times[1] - times[0]), tz)
    if faults.degradation_pct_per_year:
        out.append({"kind": "degradation", "scope": "plant", "start": start, "end": end,
                    "energy_loss_kwh": round(energy("degradation"), 3), "parameters": {
                        "rate_pct_per_year": -faults.degradation_pct_per_year,
                        "since": str(site.commissioned), "shape": "linear in time, on DC"}})
    for ep in faults.soiling:
        inside = window(times, ep.start, ep.cleaning, tz)
        if inside.any():
            e = entry("soiling", "plant", ep.start, ep.cleaning, tz, {
                "rate_pct_per_day": ep.rate_pct_per_day,
                "rain_wash_mm_per_24h": faults.soiling_rain_mm,
                "recoveries": soiling_recoveries(times, ph.weather.rain, faults, tz)},
                energy("soiling", inside))
            clean = float(runs[0].ac[:, inside].sum() * kwh)
            e["parameters"]["loss_pct_of_clean"] = round(100 * e["energy_loss_kwh"] / clean, 3)
            out.append(e)
    tree = faults.tree
    if tree is not None and (loss("shading", inverter=tree.inverter)[0] > 1.0).any():
        years = (times[-1] - local_ts(tree.reference, tz)).total_seconds() / (365.25 * 86400)
        first, _ = _span(times, loss("shading", inverter=tree.inverter)[0] > 1.0, tz)
        out.append({"kind": "shading", "scope": f"inverter:{tree.inverter}", "start": first,
                    "end": end, "energy_loss_kwh": round(energy("shading", None, tree.inverter), 3),
                    "parameters": {
                        "obstruction": "a tree, growing", "azimuth_from_deg": tree.azimuth_from_deg,
                        "azimuth_to_deg": tree.azimuth_to_deg, "top_deg": tree.top_deg,
                        "top_deg_on": tree.reference,
                        "growth_deg_per_year": tree.growth_deg_per_year,
                        "top_deg_at_end": round(tree.top_deg + tree.growth_deg_per_year * years, 2),
                        "transmittance": tree.transmittance,
                        "affects": "beam and circumsolar light"}})
    stall = faults.tracker_stall
    if stall is not None and window(times, stall.start, stall.end, tz).any():
        held = window(times, stall.start, stall.end, tz)
        out.append(entry("tracker_stall", f"inverter:{stall.inverter}", stall.start, stall.end,
                         tz, {"angle_deg": ph.stall_angle_deg,
                              "note": "the tracker drive stopped; the rows stayed at the "
                                      "rotation they had then and did not stow"},
                         energy("tracker_stall", held)))
    cut = faults.string_loss
    if cut is not None and window(times, cut.start, cut.end, tz).any():
        strings = sum(a.strings for a in site.inverter(cut.inverter).arrays)
        out.append(entry("partial_outage", f"inverter:{cut.inverter}", cut.start, cut.end, tz, {
            "strings_lost": cut.strings_lost, "strings": strings,
            "dc_share_lost": round(cut.strings_lost / strings, 4)},
            energy("partial_outage", window(times, cut.start, cut.end, tz))))
    off = faults.outage
    if off is not None and window(times, off.start, off.end, tz).any():
        out.append(entry("outage", f"inverter:{off.inverter}", off.start, off.end, tz,
                         {"note": "inverter off, AC power 0"},
                         energy("outage", window(times, off.start, off.end, tz))))
    for c in faults.curtailment:
        inside = window(times, c.start, c.end, tz)
        if inside.any():
            out.append(entry("curtailment", "plant", c.start, c.end, tz,
                             {"setpoint_kw": c.setpoint_kw, "shared": "pro rata over inverters"},
                             energy("curtailment", inside)))
    return out


def energy_truth(site: Site, ph: Physics, faults: Faults, interval_min: int
                 ) -> tuple[Plant, pd.DataFrame, list[dict]]:
    """The faulted plant, the daily table and the truth entries of the energy faults."""
    runs = [run_plant(ph, faults, k) for k in range(len(ATTRIBUTION_ORDER) + 1)]
    entries = design_entries(site, ph.times, runs[0], interval_min)
    entries += stow_entries(site, ph, faults, runs[0], interval_min)
    entries += fault_entries(site, ph, faults, runs, interval_min)
    return runs[-1], daily_table(site, ph.times, runs, interval_min), entries
