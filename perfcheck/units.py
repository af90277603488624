"""Units: suspected unit errors found in the data, and the site file's corrections.

Part of the quality stage (``quality.run`` calls :func:`run`). A logger that writes a column
in another unit than its units row and the site file say (AC power in kW under "W") loads
without complaint: every value is a plausible number, only the level is wrong. Read as W,
a healthy inverter then looks stopped, and the detectors report a false outage. This module
compares each file's level of each inverter (or plant) power and interval-energy column with
its neighbours, and when it sits a *clean factor* off them, stores a data-quality finding
("suspected unit error": file, column, factor) and leaves that file's column out of
``readings`` (table ``unit_adjust``, factor NULL) until the site file settles it with a
``[[corrections]]`` entry (files glob, column, factor or unit, reason), which multiplies the
stored values when they are read (``readings``), so the change is recorded (table
``unit_corrections``), reversible and re-run by ``verify`` from the bundle's site file.

The clean factors are the ratios between the units the site file accepts, or that loggers
confuse with them: 1000 and 1 000 000 (the SI prefixes k and M: W/kW/MW, Wh/kWh/MWh), 3600
(Wh against J, W against J per hour), 3.6 (kWh against MJ) and, for a power column, 60 /
interval [min] (energy per interval written where mean power is declared: 4 at 15 min, 12
at 5 min, 60 at 1 min); each also the other way round.

The rule, per file and column (``decide``), using the values as stored:

1. **Against the device's energy** (the power column against the interval energy or the
   register steps of the same inverter, or an interval-energy column against the power):
   over at least :data:`PAIR_MIN` intervals where the reference shows production (at least
   :data:`MIN_SHARE` of the rating), the median of power x interval / energy. Within
   :data:`PAIR_TOLERANCE` of a clean factor f, with the ratio steady (upper over lower
   quartile at most :data:`PAIR_SPREAD`) and the reference's own level plausible for the
   rating: suspected, factor f. Within the tolerance of 1: consistent, no finding.
   False alarms: both columns measure the same inverter over the same intervals, so for a
   correct pair the median ratio differs from 1 only by the sampling of power within the
   interval (a few per cent, common practice); the nearest clean factor, 3.6, is three times
   the tolerance away. No fault of the plant changes the ratio: a stopped inverter writes
   zero in both.
2. **Against the other files of the same column** (when step 1 has no reference): the ratio of
   the median of the other files' levels (99th percentile of the positive values) to this
   file's. Within a factor :data:`LEVEL_TOLERANCE` of 1000 or 1 000 000 (either way),
   with the file's own level outside the plausible share of the rating
   (:data:`PLAUSIBLE_SHARE`) and its values following the sun (:data:`SUN_CORR_MIN`):
   suspected. Within the tolerance of 1: consistent.
3. **Against the rating** (no other reference): the rating over the level, between 1/1.2
   and 50 times 1000 or 1 000 000 (or the inverse for values too high), with the values
   following the sun: suspected.

False alarms of steps 2 and 3: a month's peak differs from another month's by the season and
the weather, at most about 4 times (the darkest month of a working plant still peaks above
1/50 of its rating: common practice), far from 1000. An inverter that is stopped or nearly so
writes zeros or noise, whose daylight values do not follow the sun (:func:`follows_the_sun`:
noise has a correlation with the cosine of the zenith near 0, standard error 1/sqrt(n)), so it
is never taken for a unit error, and the outage detector still sees it. Only a column whose
level is implausible for its rating can be a finding in steps 2 and 3. A limit: modules under
snow for a whole file's period, still yielding a trace that follows the sun at 1/250 to 1/4000
of the other files' level, would be taken for a factor 1000; the finding then says so, the
readings are left out (a gap, not an outage), and ``factor = 1`` in a correction lifts it.

The expected series is not a reference here. Against it only the prefix factors could be
tested safely, since a fault scales the output steadily by other factors too (three of four
strings lost read like energy per 15 minutes written as W: a quarter), and for those the
rating with the sun gives the same answer one stage earlier: before the model, so that the
values the model and the alignment read are decided once per ingest.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pandas as pd

from perfcheck import db
from perfcheck.errors import SiteFileError
from perfcheck.ingest import UNIT_TO_SI
from perfcheck.site import (
    QUANTITIES,
    Logger,
    Site,
    Table,
    glob_specificity,
    name_matches,
)

CLEAN_FACTORS = (3.6, 1e3, 3.6e3, 1e6)
PREFIX_FACTORS = (1e3, 1e6)
PAIR_MIN = 12  # intervals with production behind the energy comparison
PAIR_TOLERANCE = 1.2  # the median ratio within this factor of a clean factor (or of 1)
PAIR_SPREAD = 1.5  # upper over lower quartile of the ratio: a steady ratio
MIN_SHARE = 0.02  # of the rating (x interval): the reference shows production
LEVEL_TOLERANCE = 4.0  # season and weather: one file's peak against another's
PLAUSIBLE_SHARE = (1 / 50, 1.2)  # a working column's 99th percentile over its rating
RATING_BAND = (1 / 1.2, 50.0)  # rating / level over a prefix factor
SUN_CORR_MIN = 0.15  # and at least SUN_CORR_SIGMAS / sqrt(n) (noise: standard error 1/sqrt(n))
SUN_CORR_SIGMAS = 4.0
SUN_MIN_ROWS = 50
POWER = ("ac_power_w", "dc_power_w")
REFERENCE_WORDS = {"energy": "the same inverter's energy", "other files": "the other files of "
                   "the column", "rating": "the rating"}


@dataclass(frozen=True)
class Correction:
    """One ``[[corrections]]`` entry: multiply ``column`` of the files matching ``files`` by
    ``factor`` (given, or from the ``unit`` the column is really in)."""

    key: str  # corrections[i]
    files: str
    column: str
    factor: float | None
    unit: str | None
    reason: str


def load_corrections(site: Site) -> tuple[Correction, ...]:
    """Validate the optional ``[[corrections]]`` array of the site file (SiteFileError naming
    the key)."""
    top = Table({"corrections": site.raw.get("corrections")} if "corrections" in site.raw
                else {}, "", site.path)
    mapped = {c.name for lg in site.loggers for c in lg.columns if c.quantity != "status"}
    out = []
    for t in top.tables("corrections", required=False):
        column = t.get("column", str)
        if column not in mapped:
            raise t._err("column", f"{column!r} is not a measured column of any [[loggers]] "
                         "entry (status codes have no unit)")
        factor = t.number("factor", None, lo=1e-9, hi=1e9)
        unit = t.get("unit", str, None)
        if (factor is None) == (unit is None):
            raise t._err("factor", "give either factor (multiply the values as read) or unit "
                         "(the unit the column is really in), not both")
        plain = [u for u, (_, offset) in UNIT_TO_SI.items() if offset == 0]
        if unit is not None and unit not in plain:
            raise t._err("unit", f"{unit!r} is not one of {', '.join(plain)}")
        reason = t.get("reason", str).strip()
        if not reason:
            raise t._err("reason", "say why (who checked what, when)")
        out.append(Correction(t.path, t.get("files", str), column, factor, unit, reason))
        t.done()
    return tuple(out)


def read_digest(site: Site) -> str:
    """Digest of the site-file settings that change how stored values are read: the
    ``[[corrections]]`` and each historian logger's ``carry_forward_min``."""
    settings = {"corrections": site.raw.get("corrections", []),
                "carry": {lg.name: lg.carry_forward_min for lg in site.loggers}}
    return hashlib.sha256(json.dumps(settings, sort_keys=True, default=str).encode()
                          ).hexdigest()


def current(con: duckdb.DuckDBPyConnection, site: Site) -> bool:
    """True when the quality stage last ran with the site file's present read settings
    (:func:`read_digest`)."""
    row = con.execute("SELECT corrections_sha256 FROM unit_state").fetchall()
    return bool(row) and row[0][0] == read_digest(site)


def recompute_from(con: duckdb.DuckDBPyConnection, file_id: int) -> None:
    """Make the model recompute the intervals of the readings of files from ``file_id`` on
    (the values of a file read differently changed)."""
    con.execute("UPDATE align_state SET last_file_id = least(last_file_id, ?)", [file_id - 1])


# --------------------------------------------------------------------------------------------
# the statistic


def clean_factor(ratio: float, factors: tuple[float, ...], tolerance: float) -> float | None:
    """The clean factor f (or 1/f) of ``factors`` nearest to ``ratio`` (in log), if ``ratio``
    lies within ``tolerance`` (a factor) of it; else None."""
    if not ratio > 0 or not math.isfinite(ratio):
        return None
    candidates = [f for g in factors for f in (g, 1 / g)]
    best = min(candidates, key=lambda f: abs(math.log(ratio / f)))
    return best if abs(math.log(ratio / best)) <= math.log(tolerance) else None


def follows_the_sun(corr: float | None, n: int) -> bool:
    """Whether values correlate with the cosine of the sun's zenith over ``n`` daylight rows
    beyond what noise gives: at least :data:`SUN_MIN_ROWS` rows and a correlation of at least
    :data:`SUN_CORR_MIN` and :data:`SUN_CORR_SIGMAS` standard errors (1/sqrt(n) for values
    unrelated to the sun; one-sided chance about 3e-5)."""
    return corr is not None and n >= SUN_MIN_ROWS and corr >= max(
        SUN_CORR_MIN, SUN_CORR_SIGMAS / math.sqrt(n))


def near_one(ratio: float, tolerance: float) -> bool:
    return ratio > 0 and abs(math.log(ratio)) <= math.log(tolerance)


def rating_factor(rating_over_level: float) -> float | None:
    """The prefix factor f with rating / level / f within :data:`RATING_BAND` (values too low
    by f), or 1/f with level / rating / f within it inverted (too high); else None."""
    for f in PREFIX_FACTORS:
        for g in (f, 1 / f):
            x = rating_over_level / g
            if (RATING_BAND[0] <= x <= RATING_BAND[1]) if g > 1 else (
                    1 / RATING_BAND[1] <= x <= 1 / RATING_BAND[0]):
                return g
    return None


def decide(level: dict, pair: dict | None, others: list[float], partner_plausible: bool,
           rating: float, interval_min: int) -> tuple[float, str, str] | None:
    """(factor, reference, figures) of a suspected unit error of one file's column, or None.

    ``level``: p99 (of the positive values), n_day and sun_corr; ``pair``: n, q25, q50, q75
    of the energy comparison (or None); ``others``: the other files' p99 of the column;
    ``rating``: the column's rating (W, or Wh per interval). The factor multiplies the
    stored values to bring them to the reference. See the module docstring for the rule.
    """
    p99 = level.get("p99")
    plausible = p99 is not None and PLAUSIBLE_SHARE[0] <= p99 / rating <= PLAUSIBLE_SHARE[1]
    follows_sun = follows_the_sun(level.get("sun_corr"), level.get("n_day") or 0)
    if pair is not None and pair["n"] >= PAIR_MIN and pair["q25"] > 0 \
            and pair["q75"] / pair["q25"] <= PAIR_SPREAD:
        x = 1 / pair["q50"]
        f = clean_factor(x, CLEAN_FACTORS + (60 / interval_min,), PAIR_TOLERANCE)
        if f is not None and partner_plausible:
            return f, "energy", (f"median ratio to the same inverter's energy "
                                 f"{pair['q50']:.4g} over {pair['n']} intervals")
        if near_one(x, PAIR_TOLERANCE):
            return None
    if p99 is None or plausible or not follows_sun:
        return None
    if others:
        x = float(pd.Series(others).median()) / p99
        f = clean_factor(x, PREFIX_FACTORS, LEVEL_TOLERANCE)
        if f is not None:
            return f, "other files", (f"99th percentile {p99:.4g} against {x * p99:.4g} in "
                                      f"the other {len(others)} file(s) of the column")
        if near_one(x, LEVEL_TOLERANCE):
            return None
    f = rating_factor(rating / p99)
    if f is None:
        return None
    return f, "rating", f"99th percentile {p99:.4g} against a rating of {rating:.4g}"


# --------------------------------------------------------------------------------------------
# the stage


def _rating(site: Site, quantity: str, device: str, interval_min: int) -> float:
    if device == "plant":
        ac = site.ac_kw if site.export_limit_kw is None else min(site.ac_kw,
                                                                 site.export_limit_kw)
        dc = site.dc_kwp
    else:
        inv = site.inverter(device)
        ac, dc = inv.ac_kw, inv.dc_kwp
    kw = dc if quantity == "dc_power_w" else ac
    return 1e3 * kw * (interval_min / 60 if quantity == "energy_interval_wh" else 1.0)


def _columns(lg: Logger | None, quantity: str, device: str) -> list:
    if lg is None:
        return []
    return [c for c in lg.columns if c.stored == quantity and c.device == device]


def _column_name(lg: Logger | None, quantity: str, device: str) -> str:
    cols = _columns(lg, quantity, device)
    if not cols:
        return quantity
    c = cols[0]
    return c.name + (f" (device {', '.join(c.when_device)})" if c.when_device else "")


def _resolved(site: Site, files: pd.DataFrame, channels: pd.DataFrame,
              corrections: tuple[Correction, ...]) -> list[tuple]:
    """(file_id, channel_id, column, quantity, device, factor, rule, reason) of every stored
    file's channel a correction applies to: of several matching one file and column, the most
    specific glob; two equally specific are a SiteFileError."""
    loggers = {lg.name: lg for lg in site.loggers}
    out = []
    for file_id, path, logger in files.itertuples(index=False):
        lg = loggers.get(logger)
        if lg is None:
            continue
        name = Path(path).name
        for column in dict.fromkeys(c.column for c in corrections):
            hits = [c for c in corrections if c.column == column and name_matches(name, c.files)
                    and any(col.name == column for col in lg.columns)]
            if not hits:
                continue
            best = max(glob_specificity(c.files) for c in hits)
            top = [c for c in hits if glob_specificity(c.files) == best]
            if len(top) > 1:
                raise SiteFileError(
                    f"{site.path}: {top[0].key} (files {top[0].files!r}) and {top[1].key} (files "
                    f"{top[1].files!r}) both correct column {column!r} of {path} equally "
                    "specifically; make one files glob more specific")
            c = top[0]
            for col in (x for x in lg.columns if x.name == column):
                factor = c.factor
                if factor is None:
                    if c.unit not in QUANTITIES[col.quantity][1]:
                        raise SiteFileError(f"{site.path}: {c.key}.unit: {c.unit!r} is not a "
                                            f"unit of {col.quantity} (column {column!r})")
                    factor = UNIT_TO_SI[c.unit][0] / UNIT_TO_SI[col.unit][0]
                hit = channels[(channels["quantity"] == col.stored)
                               & (channels["device"] == col.device)]
                for channel_id in hit["channel_id"]:
                    out.append((int(file_id), int(channel_id), _column_name(
                        lg, col.stored, col.device), col.stored, col.device, float(factor),
                        f"{c.key} (files {c.files!r})", c.reason))
    return out


def findings(site: Site, levels: pd.DataFrame, pairs: pd.DataFrame,
             settled: set[tuple[int, int]], logger_of: dict[int, str]) -> list[tuple]:
    """(file_id, channel_id, column, quantity, device, factor, reference, detail) of every
    suspected unit error among the files' columns not ``settled`` by a correction."""
    loggers = {lg.name: lg for lg in site.loggers}
    known = {inv.id for inv in site.inverters} | {"plant"}
    pair = {(int(r.file_id), int(r.channel_id)): r._asdict() for r in pairs.itertuples()}
    levels = levels[levels["device"].isin(known)]
    share = {}
    for (q, d, iv), g in levels.groupby(["quantity", "device", "interval_min"]):
        share[(q, d)] = g["p99"].median() / _rating(site, q, d, int(iv))
    out = []
    for r in levels.itertuples():
        key = (int(r.file_id), int(r.channel_id))
        if key in settled:
            continue
        same = levels[(levels["channel_id"] == r.channel_id) & (levels["file_id"] != r.file_id)]
        others = [o.p99 for o in same.itertuples() if pd.notna(o.p99) and follows_the_sun(
            o.sun_corr if pd.notna(o.sun_corr) else None, int(o.n_day))]
        partner = [share.get((q, r.device)) for q in
                   (("energy_interval_wh",) if r.quantity in POWER else ("ac_power_w",))]
        partner_ok = all(s is None or PLAUSIBLE_SHARE[0] <= s <= PLAUSIBLE_SHARE[1]
                         for s in partner)
        got = decide({"p99": r.p99 if pd.notna(r.p99) else None, "n_day": r.n_day,
                      "sun_corr": r.sun_corr if pd.notna(r.sun_corr) else None},
                     pair.get(key), others, partner_ok,
                     _rating(site, r.quantity, r.device, int(r.interval_min)),
                     int(r.interval_min))
        if got is not None:
            lg = loggers.get(logger_of[key[0]])
            out.append((*key, _column_name(lg, r.quantity, r.device), r.quantity, r.device,
                        *got))
    return out


def factor_macro(adjust: list[tuple[int, int, float | None]]) -> str:
    """The ``unit_factor(file_id, channel_id)`` macro that ``readings`` multiplies by: for
    each (file id, channel id, factor) of ``adjust`` that factor (NULL: left out), else 1.
    Only integers and floats reach the SQL text."""
    cases = " ".join(f"WHEN file_id = {int(f)} AND channel_id = {int(c)} THEN "
                     f"{'NULL' if k is None else repr(float(k))}::DOUBLE" for f, c, k in adjust)
    body = f"CASE {cases} ELSE 1.0::DOUBLE END" if adjust else "1.0::DOUBLE"
    return f"CREATE OR REPLACE MACRO unit_factor(file_id, channel_id) AS {body}"


def run(con: duckdb.DuckDBPyConnection, site: Site) -> dict[str, int]:
    """Recompute ``unit_findings``, ``unit_corrections`` and ``unit_adjust`` inside the
    caller's transaction, with the sun table ``_quality_sun`` registered (quality.run). When
    the adjustment changes, the model and the alignment recompute the files it touches.
    Returns the counts of findings and corrected (file, channel) pairs."""
    corrections = load_corrections(site)
    files = con.execute("SELECT file_id, path, logger FROM source_files ORDER BY file_id").df()
    channels = con.execute("SELECT channel_id, quantity, device FROM channels").df()
    fixed = _resolved(site, files, channels, corrections)
    ratings = pd.DataFrame(
        [(d, _rating(site, "ac_power_w", d, 60)) for d in
         [inv.id for inv in site.inverters] + ["plant"]], columns=["device", "rating_w"])
    levels = con.execute(db.sql("units_levels")).df()
    with db.registered(con, _units_ratings=ratings):
        pairs = con.execute(db.sql("units_energy"), {"min_share": MIN_SHARE}).df()
    logger_of = {int(f): lg for f, _, lg in files.itertuples(index=False)}
    found = findings(site, levels, pairs, {(f, c) for f, c, *_ in fixed}, logger_of)
    before = con.execute("SELECT file_id, channel_id, factor FROM unit_adjust "
                         "ORDER BY ALL").fetchall()
    after = sorted([(f, c, k) for f, c, _, _, _, k, _, _ in fixed]
                   + [(f, c, None) for f, c, *_ in found], key=lambda r: (r[0], r[1]))
    con.execute("DELETE FROM unit_adjust")
    con.execute("DELETE FROM unit_findings")
    con.execute("DELETE FROM unit_corrections")
    if after:
        con.executemany("INSERT INTO unit_adjust VALUES (?, ?, ?)", after)
    if after or before:
        con.execute(factor_macro(after))
    if found:
        con.executemany("INSERT INTO unit_findings VALUES (?, ?, ?, ?, ?, ?, ?)",
                        [(f, *rest) for f, _, *rest in found])
    if fixed:
        con.executemany("INSERT INTO unit_corrections VALUES (?, ?, ?, ?, ?, ?, ?)",
                        [(f, *rest) for f, _, *rest in fixed])
    con.execute("DELETE FROM unit_state")
    con.execute("INSERT INTO unit_state VALUES (?)", [read_digest(site)])
    changed = {r[0] for r in set(before) ^ {tuple(a) for a in after}}
    if changed:
        recompute_from(con, min(changed))
    return {"suspected_unit_errors": len(found), "unit_corrections": len(fixed)}


def report(con: duckdb.DuckDBPyConnection) -> dict[str, list[dict]]:
    """The stored findings and corrections, with each file's name, for the check document."""
    found = con.execute(
        "SELECT s.path AS file, u.column_name AS column, u.quantity, u.device, u.factor, "
        "u.reference, u.detail FROM unit_findings u JOIN source_files s USING (file_id) "
        "ORDER BY s.path, u.column_name").df()
    fixed = con.execute(
        "SELECT s.path AS file, u.column_name AS column, u.quantity, u.device, u.factor, "
        "u.rule, u.reason FROM unit_corrections u JOIN source_files s USING (file_id) "
        "ORDER BY s.path, u.column_name").df()
    for frame in (found, fixed):  # the name, as globs match it (paths differ on re-runs)
        frame["file"] = [Path(p).name for p in frame["file"]]
    return {"suspected_unit_errors": found.to_dict("records"),
            "unit_corrections": fixed.to_dict("records")}


def words(data_quality: dict) -> list[str]:
    """One sentence per suspected unit error and per applied correction of a check
    document's ``data_quality``, as ``check`` and the report show them."""
    out = []
    for f in data_quality.get("suspected_unit_errors", []):
        way = "low" if f["factor"] > 1 else "high"
        size = f["factor"] if f["factor"] > 1 else 1 / f["factor"]
        out.append(f"Suspected unit error: {f['file']}, column {f['column']}: the values look "
                   f"{size:g} times too {way} (against {REFERENCE_WORDS[f['reference']]}: "
                   f"{f['detail']}); they are left out of the metrics and the findings until "
                   "a [[corrections]] entry of the site file settles it.")
    for c in data_quality.get("unit_corrections", []):
        out.append(f"Unit correction: {c['file']}, column {c['column']} multiplied by "
                   f"{c['factor']:g} ({c['rule']}): {c['reason']}")
    return out


__all__ = ["CLEAN_FACTORS", "Correction", "clean_factor", "current", "decide",
           "load_corrections", "rating_factor", "read_digest", "recompute_from", "report", "run",
           "words"]
