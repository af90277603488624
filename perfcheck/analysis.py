"""Stage "analysis": the plant's whole history analysed once, stored, and read by every view.

``update(con, site)`` runs every detector over all aligned data of the site
(:func:`perfcheck.detect.analyse`), builds the loss ledger, the daily metric sums and the
degradation block, and stores them under an analysis id with the hash of its inputs (the logger
files, the aligned series, the site file's settings, the versions). It does nothing when an analysis
with the same inputs is stored already. A new analysis keeps a revision record of the earlier
findings it changed, with the reason.

``view(con, site, start, end)`` is the check document of ``[start, end)``: the stored events
clipped to the window (kind and scope kept, start and end clipped, energies summed from the
ledger over the clipped window), the losses block and the metrics summed from the ledger and
the daily sums, the guarantees. It runs no detector, so every command that asks for the same
window gets the same document.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
import hashlib
import json
import math
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import (
    align,
    db,
    detect,
    guarantees,
    ingest,
    kinds,
    meter,
    metrics,
    model,
    status,
    units,
    versions,
)
from perfcheck.detect.common import Event, _jsonable
from perfcheck.errors import DataError
from perfcheck.site import Site

if TYPE_CHECKING:  # the detectors load only when an analysis is made (perfcheck.detect)
    from perfcheck.detect.attribution import Ledger

# A revised energy counts as changed beyond this share of the earlier value, or 1 kWh
# (common practice: smaller changes are the rounding of a re-run, not a new verdict).
REVISION_SHARE = 0.05
REVISION_MIN_KWH = 1.0


@dataclasses.dataclass(frozen=True)
class Stored:
    """A stored analysis: its id, input hash and the history it covers [first_ts, end_ts)."""

    id: int
    input_hash: str
    first_ts: pd.Timestamp
    end_ts: pd.Timestamp
    created: bool  # made by this call (False: the stored one was current)


# --------------------------------------------------------------------------------------------
# inputs


def inputs(con: duckdb.DuckDBPyConnection, site: Site) -> dict[str, Any]:
    """What an analysis depends on, in a form that hashes the same on every machine."""
    files = [r[0] for r in con.execute(db.sql("analysis_input_files")).fetchall()]
    n, first, last, meas, exp = con.execute(db.sql("analysis_input_aligned")).fetchall()[0]
    return {
        "files_sha256": files,
        "aligned": {"rows": int(n), "first_ts": None if first is None else str(first),
                    "last_ts": None if last is None else str(last),
                    "measured_wh": None if meas is None else repr(float(meas)),
                    "expected_wh": None if exp is None else repr(float(exp))},
        "site_sha256": _site_digest(site),
        "versions": versions.versions(),
    }


# Site-file parts that only views read: changing them needs no new analysis.
VIEW_ONLY_SECTIONS = ("report", "guarantees")


def _site_digest(site: Site) -> str:
    """Hash of the site file's content that the analysis depends on (comments, the monthly
    job's inbox and the view-only sections left out)."""
    raw = {k: v for k, v in site.raw.items() if k not in VIEW_ONLY_SECTIONS}
    raw["site"] = {k: v for k, v in raw.get("site", {}).items() if k != "inbox"}
    return hashlib.sha256(json.dumps(raw, sort_keys=True, default=str).encode()).hexdigest()


def input_hash(spec: dict[str, Any]) -> str:
    return hashlib.sha256(json.dumps(spec, sort_keys=True).encode()).hexdigest()


def current(con: duckdb.DuckDBPyConnection) -> Stored | None:
    """The current stored analysis, if any."""
    row = con.execute(db.sql("analysis_current")).fetchone()
    if row is None:
        return None
    return Stored(int(row[0]), row[1], pd.Timestamp(row[2]).tz_convert("UTC"),
                  pd.Timestamp(row[3]).tz_convert("UTC"), False)


# --------------------------------------------------------------------------------------------
# the analysis


def tracker_angle(con: duckdb.DuckDBPyConnection) -> pd.Series | None:
    """The stored ``tracker_angle`` channel [deg] on UTC instants, None when there is none."""
    df = con.execute(db.sql("tracker_angle")).df()
    if df.empty:
        return None
    index = pd.DatetimeIndex(pd.to_datetime(df["ts"], utc=True))
    return pd.Series(df["value"].to_numpy(dtype=float), index=index).groupby(level=0).mean()


def model_weather(con: duckdb.DuckDBPyConnection
                  ) -> Callable[[pd.Timestamp, pd.Timestamp], pd.DataFrame]:
    """The stored site weather as the model takes it, between two instants
    (:func:`perfcheck.model.stored_weather`): the clock detector runs the model again on
    readings it moved back."""
    intervals = ingest.channel_intervals(con)
    return functools.partial(model.stored_weather, con, model.interval_s(intervals),
                             model.weather_intervals(intervals))


def _measured_rows(con: duckdb.DuckDBPyConnection, site: Site) -> pd.DataFrame:
    """The aligned rows of the whole history, the columns the detectors read; DataError when
    none has a measured power."""
    df = align.load_aligned(con, site, columns=detect.COLUMNS)
    if df.empty or df["measured_ac_w"].notna().sum() == 0:
        raise DataError(f"{site.path}: no measured power in the aligned series; ingest logger "
                        "files with AC power and run 'perfcheck model' first")
    return df


def update(con: duckdb.DuckDBPyConnection, site: Site,
           progress: Callable[[str], None] | None = None) -> Stored:
    """Analyse the whole history unless an analysis of the same inputs is stored; return it.

    Raises DataError when nothing has been aligned yet.
    """
    site = ingest.aged(con, site)
    spec = inputs(con, site)
    key = input_hash(spec)
    now = current(con)
    if now is not None and now.input_hash == key:
        return now
    with db.memory_limit(con, db.ANALYSIS_MEMORY_LIMIT):
        return _make(con, site, spec, key, now, progress)


def _make(con: duckdb.DuckDBPyConnection, site: Site, spec: dict[str, Any], key: str,
          now: Stored | None, progress: Callable[[str], None] | None) -> Stored:
    """A new analysis of the inputs ``spec`` (hash ``key``), stored and made current."""
    settings = metrics.load_settings(site)
    # the whole history's rows go to the detectors without a name here, so that they are
    # released once the detectors have their own series (the peak of memory is theirs)
    found = detect.analyse(_measured_rows(con, site), site, reported=status.reported(con, site),
                           angle=tracker_angle(con), weather=model_weather(con))
    if progress:
        progress("detectors")
    ledger: Ledger = found["ledger"]
    events = _restate(found["events"], ledger)
    model_json = json.dumps(_jsonable(found["model"]), sort_keys=True)
    degradation_json = json.dumps(_jsonable(found["degradation"]), sort_keys=True)
    del found  # the detectors' series: released before the storing queries need memory
    first = pd.Timestamp(ledger.index[0])  # one interval length per site (model.run)
    end = pd.Timestamp(ledger.index[-1]) + pd.Timedelta(seconds=float(ledger.interval_s[-1]))
    start_day, end_day = _whole_days(site, first, end)
    t_typ = metrics.typical_cell_temperature(con, site, end_day, settings)
    at = meter.load_settings(site)
    delivered = meter.delivered(con, site, ledger.index, ledger.interval_s, ledger.measured_w,
                                ledger.expected_w)
    new_id = con.execute(db.sql("analysis_next_id")).fetchone()[0]
    record = {"inputs": spec, "t_cell_typ_avg": list(t_typ),
              "meter_unplaced_kwh": None if delivered is None
              else delivered.unplaced_wh / 1000.0}
    with db.transaction(con):
        con.execute(db.sql("analysis_drop_current_detail"))
        con.execute(db.sql("analysis_insert"), {
            "id": new_id, "hash": key, "inputs": json.dumps(record, sort_keys=True),
            "created_at": dt.datetime.now(dt.UTC), "first_ts": start_day, "end_ts": end_day,
            "settings": json.dumps(dataclasses.asdict(settings), sort_keys=True, default=str),
            "model": model_json, "degradation": degradation_json})
        _store_events(con, new_id, events, site)
        _store_ledger(con, new_id, ledger, events, delivered)
        windows = metrics.event_windows([{"kind": e.kind, "scope": e.scope, "start": e.start,
                                          "end": e.end} for e in events], settings)
        for basis in ("inverter", "meter") if at.at_meter else ("inverter",):
            daily = metrics.daily_sums(con, site, start_day, end_day, settings, new_id,
                                       windows, basis, at.factor)
            _insert_frame(con, "analysis_daily", daily.assign(analysis_id=new_id, basis=basis))
        if now is not None:
            _revise(con, now, new_id, spec)
        con.execute(db.sql("analysis_make_current"), {"id": new_id})
    if progress:
        progress("stored")
    return Stored(int(new_id), key, start_day, end_day, True)


def _whole_days(site: Site, first: pd.Timestamp, end: pd.Timestamp
                ) -> tuple[pd.Timestamp, pd.Timestamp]:
    """Site-local midnights around ``[first, end)`` in UTC."""
    lo = first.tz_convert(site.tz).normalize()
    hi = (end - pd.Timedelta(microseconds=1)).tz_convert(site.tz).normalize()
    return lo.tz_convert("UTC"), (hi + pd.DateOffset(days=1)).tz_convert("UTC")


def _restate(events: list[Event], ledger: Ledger) -> list[Event]:
    """Each event's energy as the sum of its ledger entries; its band scaled alike."""
    total: dict[int, float] = {}
    for entry in ledger.entries:
        total[id(entry.event)] = total.get(id(entry.event), 0.0) + ledger.energy_kwh(entry)
    out = []
    for ev in events:
        e = total.get(id(ev), 0.0)
        own = ev.energy_loss_kwh
        k = e / own if own and math.isfinite(own) else 0.0
        low, high = (ev.energy_loss_kwh_low * k, ev.energy_loss_kwh_high * k) if k else (e, e)
        ev.energy_loss_kwh, ev.energy_loss_kwh_low, ev.energy_loss_kwh_high = \
            e, min(low, high, e), max(low, high, e)
        out.append(ev)
    return out


def _insert_frame(con: duckdb.DuckDBPyConnection, table: str, frame: pd.DataFrame) -> None:
    """Append the frame's columns of ``table`` to it. The frame is scanned as a relation, not
    registered as a view: a view dropped inside the transaction keeps its frame alive until
    the commit, so the ledger's rows would stay in memory through the daily sums."""
    cols = [r[0] for r in con.execute(f"DESCRIBE {table}").fetchall()]
    con.from_df(frame[cols]).insert_into(table)


def _store_events(con: duckdb.DuckDBPyConnection, analysis_id: int, events: list[Event],
                  site: Site) -> None:
    rows = []
    for i, e in enumerate(events):
        d = e.to_dict(site.tz)
        rows.append({"analysis_id": analysis_id, "event_id": i, "kind": e.kind,
                     "scope": e.scope, "start_ts": e.start, "end_ts": e.end,
                     "energy_kwh": e.energy_loss_kwh, "energy_kwh_low": e.energy_loss_kwh_low,
                     "energy_kwh_high": e.energy_loss_kwh_high, "method": e.method,
                     "evidence_json": json.dumps(d["evidence"], sort_keys=True),
                     "detail_json": json.dumps({k: v for k, v in d.items() if k not in _FIELDS},
                                               sort_keys=True)})
    if rows:
        _insert_frame(con, "analysis_events", pd.DataFrame(rows))


_FIELDS = ("kind", "scope", "start", "end", "energy_loss_kwh", "energy_loss_kwh_low",
           "energy_loss_kwh_high", "method", "evidence")


# Ledger rows stored per insert: the frame of a whole 1-minute site-year (525,600 rows) is some
# 45 MB beside everything the analysis holds, a piece of 32,768 rows under 3 MB (a trade of
# memory against the cost of an insert; the stored rows are the same).
LEDGER_PIECE = 2**15


def _store_ledger(con: duckdb.DuckDBPyConnection, analysis_id: int, led: Ledger,
                  events: list[Event], delivered: meter.Placed | None) -> None:
    """The ledger's rows and entries; ``delivered`` the meter's energy on its grid
    (:func:`perfcheck.meter.delivered`; None without a meter)."""
    hours = led.interval_s / 3600.0
    meas = led.measured_w * hours[:, None]
    exp = led.expected_w * hours[:, None]
    une = led.unexplained_w() * hours[:, None]
    deliv = np.full(meas.shape, np.nan) if delivered is None else delivered.energy_wh
    shaped = np.zeros(len(led.index), dtype=bool) if delivered is None else delivered.shaped
    has = np.isfinite(meas) | np.isfinite(exp) | np.isfinite(deliv)
    nonzero_rows, nonzero_cols = np.nonzero(has)
    inv = np.asarray(led.inverters, dtype=object)
    for at in range(0, len(nonzero_rows), LEDGER_PIECE):  # in pieces: one frame at a time
        rows = nonzero_rows[at:at + LEDGER_PIECE]
        cols = nonzero_cols[at:at + LEDGER_PIECE]
        _insert_frame(con, "ledger", pd.DataFrame({
            "analysis_id": analysis_id, "ts": led.index[rows], "inverter_id": inv[cols],
            "interval_s": led.interval_s[rows], "measured_wh": meas[rows, cols],
            "expected_wh": exp[rows, cols], "unexplained_wh": une[rows, cols],
            "poa_wm2": led.poa[rows, cols], "delivered_wh": deliv[rows, cols],
            "delivered_shaped": shaped[rows]}, copy=False))  # columns not joined into a copy
    seq = {id(e): i for i, e in enumerate(events)}
    parts = [pd.DataFrame({"event_id": seq[id(en.event)], "ts": led.index[en.rows],
                           "inverter_id": inv[en.cols],
                           "energy_wh": en.power_w * hours[en.rows]})
             for en in led.entries if len(en.rows)]
    if parts:
        _insert_frame(con, "analysis_entries",
                      pd.concat(parts, ignore_index=True).assign(analysis_id=analysis_id))


# --------------------------------------------------------------------------------------------
# revisions


def _revise(con: duckdb.DuckDBPyConnection, before: Stored, new_id: int,
            spec: dict[str, Any]) -> None:
    """Record which findings of the earlier analysis, within the history it covered, the new
    one changed, and why."""
    old_inputs = json.loads(con.execute(db.sql("analysis_inputs"),
                                        {"id": before.id}).fetchone()[0])["inputs"]
    reason = _why(old_inputs, spec)
    a = _event_frame(con, before.id, before.end_ts)
    b = _event_frame(con, new_id, before.end_ts)
    rows = []
    now = dt.datetime.now(dt.UTC)
    used: set[int] = set()
    for _, x in a.iterrows():
        match = b[(b["kind"] == x["kind"]) & (b["scope"] == x["scope"])
                  & (b["start_ts"] < x["end_ts"]) & (b["end_ts"] > x["start_ts"])
                  & ~b.index.isin(list(used))]
        if match.empty:
            rows.append(_revision(new_id, before.id, "withdrawn", x, None, reason, now))
            continue
        y = match.iloc[0]
        used.add(int(match.index[0]))
        moved = x["start_ts"] != y["start_ts"] or (x["end_ts"] != y["end_ts"]
                                                   and x["end_ts"] < before.end_ts)
        delta = abs(y["energy_kwh"] - x["energy_kwh"])
        if moved or delta > max(REVISION_MIN_KWH, REVISION_SHARE * abs(x["energy_kwh"])):
            rows.append(_revision(new_id, before.id, "changed", x, y, reason, now))
    for i, y in b.iterrows():
        if i not in used:
            rows.append(_revision(new_id, before.id, "found earlier", None, y, reason, now))
    if rows:
        _insert_frame(con, "analysis_revisions", pd.DataFrame(rows))


def _event_frame(con: duckdb.DuckDBPyConnection, analysis_id: int, before: pd.Timestamp
                 ) -> pd.DataFrame:
    """Events of an analysis that start before ``before`` (energy clipped there)."""
    df = con.execute(db.sql("analysis_events_before"),
                     {"id": analysis_id, "before": before}).df()
    for c in ("start_ts", "end_ts"):
        df[c] = pd.to_datetime(df[c], utc=True)
    return df


def _revision(new_id: int, old_id: int, change: str, x: Any, y: Any, reason: str,
              now: dt.datetime) -> dict[str, Any]:
    def get(r: Any, k: str) -> Any:
        return None if r is None else r[k]

    ref = x if x is not None else y
    return {"analysis_id": new_id, "previous_id": old_id, "change": change,
            "kind": ref["kind"], "scope": ref["scope"], "before_start": get(x, "start_ts"),
            "before_end": get(x, "end_ts"), "before_kwh": get(x, "energy_kwh"),
            "after_start": get(y, "start_ts"), "after_end": get(y, "end_ts"),
            "after_kwh": get(y, "energy_kwh"), "reason": reason, "created_at": now}


def _why(old: dict[str, Any], new: dict[str, Any]) -> str:
    parts = []
    added = len(set(new["files_sha256"]) - set(old["files_sha256"]))
    if added:
        last = new["aligned"]["last_ts"]
        parts.append(f"{added} new logger file(s), data now up to {str(last)[:10]}")
    elif new["aligned"] != old["aligned"]:
        parts.append("the expected series was recomputed")
    if new.get("site_sha256") != old.get("site_sha256"):
        parts.append("the site file changed")
    if new["versions"] != old["versions"]:
        parts.append("the software versions changed")
    return "; ".join(parts) or "re-analysed"


# --------------------------------------------------------------------------------------------
# views


def events(con: duckdb.DuckDBPyConnection, site: Site, stored: Stored, start: pd.Timestamp,
           end: pd.Timestamp) -> list[dict[str, Any]]:
    """The stored events that touch ``[start, end)``, clipped to it, in the check JSON form."""
    df = con.execute(db.sql("analysis_events_window"), {
        "id": stored.id, "start": start, "end": end}).df()
    out = []
    for r in df.to_dict("records"):
        whole = r["energy_kwh"]
        e = float(r["window_kwh"])
        k = e / whole if whole else 1.0
        low, high = (r["energy_kwh_low"] * k, r["energy_kwh_high"] * k) if whole else (e, e)
        ev = Event(kind=r["kind"], scope=r["scope"],
                   start=max(pd.Timestamp(r["start_ts"]), start).tz_convert("UTC"),
                   end=min(pd.Timestamp(r["end_ts"]), end).tz_convert("UTC"),
                   energy_loss_kwh=e, energy_loss_kwh_low=min(low, high, e),
                   energy_loss_kwh_high=max(low, high, e), method=r["method"],
                   evidence=json.loads(r["evidence_json"]), detail={})
        d = ev.to_dict(site.tz)
        d.update(json.loads(r["detail_json"]))
        d["found_start"] = pd.Timestamp(r["start_ts"]).tz_convert(site.tz).isoformat()
        d["found_end"] = pd.Timestamp(r["end_ts"]).tz_convert(site.tz).isoformat()
        out.append(d)
    return out


def meter_block(con: duckdb.DuckDBPyConnection, stored: Stored, start: pd.Timestamp,
                end: pd.Timestamp, at: meter.MeterSettings) -> dict[str, Any]:
    """The export meter's part of the losses block of ``[start, end)``: from the inverters'
    output to the energy delivered at the meter, sums over the ledger (``sql/ledger_meter``);
    the basis of the plant's figures in words."""
    block: dict[str, Any] = {"basis": at.basis, "basis_words": at.words()}
    if not at.has_meter:
        return block
    inv, ac, unmetered, outside, deliv, base, shaped = con.execute(db.sql("ledger_meter"), {
        "id": stored.id, "start": start, "end": end}).fetchone()
    block.update({
        "inverter_kwh": inv, "ac_losses_kwh": ac,
        "expected_ac_losses_kwh": base * at.ac_loss_pct / 100.0,
        "ac_loss_pct": at.ac_loss_pct,
        "not_metered_kwh": unmetered, "without_inverter_data_kwh": outside,
        "delivered_kwh": deliv, "shaped_kwh": shaped,
        "rule": "delivered at the meter = the inverters' measured energy, less the AC losses "
                "(inverters less meter over the intervals with both), less the inverters' "
                "energy in intervals the meter has no energy for, plus the meter's energy in "
                "intervals where the inverters logged nothing (a register step across a "
                "logger gap, spread in the shape of the expected power: measured energy, not "
                "an outage loss); shaped_kwh: the meter's energy of steps over several "
                "intervals, spread in the shape of the expected power",
    })
    return block


def losses(con: duckdb.DuckDBPyConnection, stored: Stored, start: pd.Timestamp,
           end: pd.Timestamp) -> dict[str, Any]:
    """The losses block of ``[start, end)``: sums over the ledger."""
    p = {"id": stored.id, "start": start, "end": end}
    expected, measured, unexplained = con.execute(db.sql("ledger_totals"), p).fetchone()
    by = dict(con.execute(db.sql("ledger_by_kind"), p).fetchall())
    cause = {k: float(by[k]) for k in kinds.LOSS_ORDER if k in by and by[k] != 0.0}
    design = {k: float(v) for k, v in by.items() if not kinds.is_loss(k) and v}
    return {
        "expected_kwh": float(expected or 0.0), "measured_kwh": float(measured or 0.0),
        "by_cause_kwh": cause, "unexplained_kwh": float(unexplained or 0.0),
        "design_kwh": design,
        "order": [*kinds.LOSS_ORDER, "unexplained"],
        "rule": "the expected energy (the design at its ageing allowance, irradiance-sensor "
                "faults rebuilt from modelled irradiance) less the measured energy (clock "
                "faults shifted back), over the intervals with both, split by cause: whole "
                "intervals first (outage, clipping below the rating, curtailment), then shares "
                "of what is left (degradation beyond the allowance, soiling, shading, "
                "stalled trackers and rows out of step, lost strings) one after another, then "
                "the significant rest of each period the baseline test flags "
                "(underperformance); the remainder is unexplained. Clipping at the AC rating "
                "and a tracker's wind stow are inside the expected series by design and are "
                "shown apart, not as losses",
    }


def revisions(con: duckdb.DuckDBPyConnection, site: Site, stored: Stored, start: pd.Timestamp,
              end: pd.Timestamp) -> list[dict[str, Any]]:
    """Revisions of findings in ``[start, end)`` recorded up to the current analysis."""
    df = con.execute(db.sql("analysis_revisions_window"), {
        "id": stored.id, "start": start, "end": end}).df()
    out = []
    for r in df.to_dict("records"):
        def t(v: Any) -> str | None:
            return None if v is None or pd.isna(v) else \
                pd.Timestamp(v).tz_convert(site.tz).isoformat()

        def f(v: Any) -> float | None:
            return None if v is None or pd.isna(v) else round(float(v), 3)

        out.append({"change": r["change"], "kind": r["kind"], "scope": r["scope"],
                    "before": {"start": t(r["before_start"]), "end": t(r["before_end"]),
                               "energy_loss_kwh": f(r["before_kwh"])},
                    "after": {"start": t(r["after_start"]), "end": t(r["after_end"]),
                              "energy_loss_kwh": f(r["after_kwh"])},
                    "reason": r["reason"], "revised_at": t(r["created_at"])})
    return out


def view(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp, end: pd.Timestamp,
         stored: Stored | None = None) -> dict[str, Any]:
    """The check document of ``[start, end)`` clipped from the stored analysis (see
    ``perfcheck/schemas/check.schema.json``); runs no detector."""
    stored = stored or current(con)
    if stored is None:
        raise DataError(f"{site.path}: no analysis stored yet (run 'perfcheck analyse')")
    site = ingest.aged(con, site)
    settings = metrics.load_settings(site)
    record = json.loads(con.execute(db.sql("analysis_inputs"), {"id": stored.id}).fetchone()[0])
    t_typ = tuple(record["t_cell_typ_avg"])
    at = meter.load_settings(site)
    loss_pct = at.ac_loss_pct if at.has_meter else None

    def daily(a: pd.Timestamp, b: pd.Timestamp) -> tuple[pd.DataFrame, pd.DataFrame | None]:
        """The inverters' daily sums of [a, b) and, at the meter, the meter's."""
        return (_daily(con, site, stored, a, b),
                _daily(con, site, stored, a, b, "meter") if at.at_meter else None)

    inv_daily, meter_daily = daily(start, end)
    result = metrics.compute(inv_daily, site, start, end, settings, t_typ, meter_daily,
                             loss_pct)
    model, degradation = con.execute(db.sql("analysis_blocks"), {"id": stored.id}).fetchone()
    block = losses(con, stored, start, end)
    block["meter"] = meter_block(con, stored, start, end, at)
    block.update(json.loads(model))
    doc = {
        "site": metrics.site_record(site),
        "period": {"start": metrics.local_iso(start, site), "end": metrics.local_iso(end, site)},
        "settings": {**result["settings"], **site.age_record(), "plant_basis": at.words()},
        "metrics": result["metrics"],
        "events": events(con, site, stored, start, end),
        "losses": metrics.json_ready(block),
        "degradation": json.loads(degradation),
        "guarantees": [],
        "revisions": revisions(con, site, stored, start, end),
        "data_quality": units.report(con),
        "analysis": {"id": stored.id, "input_hash": stored.input_hash,
                     "history_start": metrics.local_iso(stored.first_ts, site),
                     "history_end": metrics.local_iso(stored.end_ts, site)},
        "run": metrics.run_record(),
    }

    def contract_year(a: pd.Timestamp, b: pd.Timestamp) -> dict[str, Any]:
        """The period metrics of a whole contract year [a, b) (the guarantees test those)."""
        inv, at_meter = daily(a, b)
        return metrics.period_summary(inv, site, a, b, settings, t_typ, at_meter, loss_pct)

    doc["guarantees"] = guarantees.evaluate(site, doc, contract_year)
    return doc


def _daily(con: duckdb.DuckDBPyConnection, site: Site, stored: Stored, start: pd.Timestamp,
           end: pd.Timestamp, basis: str = "inverter") -> pd.DataFrame:
    """The stored daily sums of ``[start, end)`` on ``basis`` ('inverter' or 'meter'), every
    calendar day present."""
    daily = con.execute(db.sql("analysis_daily_window"), {
        "id": stored.id, "tz": site.timezone, "start": start, "end": end,
        "basis": basis}).df()
    return metrics.complete_calendar(daily.drop(columns="n_nominal"), site, start, end,
                                     metrics.shortest_interval(con))


def series(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp, end: pd.Timestamp,
           stored: Stored | None = None) -> pd.DataFrame:
    """The aligned rows of ``[start, end)`` with the ledger's measured and expected power (the
    corrected series every figure shows) and the energy clipping at the AC rating and
    curtailment take from each interval (``clipping_wh``, ``curtailment_wh``); as aligned while
    no analysis is stored."""
    df = align.load_aligned(con, site, start, end)
    stored = stored or current(con)
    if stored is None:
        return df
    led = con.execute(db.sql("ledger_power"), {"id": stored.id, "start": start,
                                               "end": end}).df()
    led["ts"] = pd.to_datetime(led["ts"], utc=True)
    m = df[["ts", "inverter_id"]].merge(led, on=["ts", "inverter_id"], how="left")
    df["measured_ac_w"] = m["measured_ac_w"].to_numpy(dtype=float)
    df["expected_ac_w"] = m["expected_ac_w"].to_numpy(dtype=float)
    for col in ("clipping_wh", "curtailment_wh"):
        df[col] = m[col].fillna(0.0).to_numpy(dtype=float)
    return df
