"""The report people read: one self-contained HTML file and the same content as PDF.

``write_report(con, site, start, end, out_dir)`` runs the check for the period (or takes a result
already computed), draws the figures and writes ``report.html``, ``report.pdf``, ``check.json``,
``events.csv``, ``monthly.csv`` and ``figures/*.png``. The HTML embeds every figure as a base64
PNG and carries a Content-Security-Policy that forbids any network request, so it opens from a
USB stick. The PDF is drawn with matplotlib's ``PdfPages`` and needs no system library.
"""

from __future__ import annotations

import base64
import csv
import datetime as dt
import io
import json
import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import analysis, db, guarantees, kinds, units, versions
from perfcheck.lazy import lazy_module
from perfcheck.site import Site, Table

# matplotlib and jinja2 only when a report is drawn: validating [report] stays light
figures = lazy_module("perfcheck.figures")
pdf = lazy_module("perfcheck.pdf")
jinja2 = lazy_module("jinja2")

# Each metric and detector with its published source (shown in the report and the bundle).
METHODS: list[tuple[str, str]] = [
    ("Reference, array and final yields; performance ratio PR = Yf / Yr",
     "IEC 61724-1 (yields and PR), vocabulary of IEC TS 61836"),
    ("Temperature-corrected PR (T_ref 25 C and the annual-average-temperature variant)",
     "IEC 61724-1, temperature-corrected PR, on the module temperature by default or the cell "
     "temperature (setting pr_temp_basis)"),
    ("Weather-corrected PR with an irradiance-weighted typical cell temperature",
     "Dierauf et al. 2013, NREL/TP-5200-57991"),
    ("Energy performance index EPI = measured / expected energy",
     "expected energy from the site model: Perez et al. 1990 transposition, SAPM cell temperature "
     "(King et al. 2004, SAND2004-3535), Dobos 2014 DC and inverter models; where the site "
     "file states the modules' cell technology, its spectral factor at the sun's air mass "
     "(Lee & Panchula 2016), and where it states their efficiency at 200 W/m2, an efficiency "
     "falling with the logarithm of the irradiance through that point (Evans 1981)"),
    ("Availability, time- and energy-based", "IEC TS 63019:2019"),  # clause from memory
    ("Intervals on PR and EPI", "day-block bootstrap (whole days resampled, seeded) plus the "
     "irradiance sensor's stated uncertainty (IEC 61724-1 sensor class); where the irradiance "
     "is modelled from the horizontal reading, also the monthly bias of its split into direct "
     "and diffuse light (DISC, Maxwell 1987; size from the validations of Gueymard & "
     "Ruiz-Arias 2016 and Ineichen 2008) carried through the transposition to the plane, in "
     "quadrature (GUM), and at low sun, where the split drops the direct light, the range "
     "between none and the clear-sky direct light (Ineichen & Perez 2002)"),
    ("Underperformance periods", "robust regression of measured on expected power (statsmodels) "
     "on a reference window; CUSUM (Page 1954) on the AR(1) innovations of the daily "
     "residuals, scaled by their long-run variance"),
    ("Soiling", "Deceglie, Micheli & Muller 2018, IEEE J. Photovolt. 8(2):547 (stochastic rate "
     "and recovery, in its spirit); washes too small to find one by one placed as ramps at the "
     "episode's rate (Kimber et al. 2006) by the Schwarz criterion (Schwarz 1978)"),
    ("Degradation", "year-on-year method, Jordan et al. 2018, IEEE J. Photovolt. 8(2):525; "
     "interval: bootstrap of calendar-month blocks of pairs (Carlstein 1986) plus the irradiance "
     "sensor's stability, in quadrature (GUM)"),
    ("Clipping and curtailment", "Perry, Muller & Anderson 2021, NREL/CP-5K00-78954; operation "
     "limited by inverter or interconnection kept apart as in IEC TS 61724-2"),
    ("Guarantee tests", "one-sided test at the stated confidence level, standard error taken from "
     "the metric's interval under a normal approximation; per contract year, on complete "
     "contract years only"),
]

CAUTIONS = [
    "PV arrays are energised whenever light falls on them, and DC arcs do not extinguish by "
    "themselves. Opening a DC circuit under load can start an arc.",
    "Site work only by qualified persons, under the local electrical codes and the plant's own "
    "safety rules (isolation, lock-out, test before touch).",
    "The findings here are indications drawn from logged data. Confirm each one on site before "
    "acting on it or making it part of a claim.",
    "A claim document built from this report is evidence, not legal advice.",
]

# (field, heading, format) of the monthly table; intervals are <field>_ci_low / _ci_high.
MONTHLY_COLUMNS = [
    ("measured_kwh", "Measured [kWh]", "{:,.0f}"),
    ("expected_kwh", "Expected [kWh]", "{:,.0f}"),
    ("yr_h", "Yr [h]", "{:.1f}"),
    ("yf_h", "Yf [h]", "{:.1f}"),
    ("pr", "PR", "{:.3f}"),
    ("pr_temp_corrected", "PR temp.-corr.", "{:.3f}"),
    ("pr_weather_corrected", "PR weather-corr.", "{:.3f}"),
    ("epi", "EPI", "{:.3f}"),
    ("availability", "Availability", "{:.1%}"),
    ("specific_yield_kwh_per_kwp", "Specific yield [kWh/kWp]", "{:.1f}"),
    ("coverage", "Coverage", "{:.0%}"),
]

YIELDS_NOTE = ("Yr and Yf follow IEC 61724-1 over the intervals used for PR (daylight, valid data, "
               "outside the exclusion windows such as curtailment); Yf = E_AC / P0 in hours, "
               "the same unit as kWh per kWp. The specific yield is the whole period's AC "
               "energy per kWp: every valid daylight interval, excluded ones included, and the "
               "intervals without data filled with their expected energy times the EPI. It is "
               "therefore at least Yf; the difference is the energy of the excluded intervals "
               "and of the gaps.")

LOSSES_LEAD = ("Where the expected energy went: every energy in this report is a sum over one "
               "ledger of the intervals that have both a measured and an expected value, so "
               "expected less the causes and the unexplained rest is the measured energy. "
               "With an export meter it goes on to the energy delivered there: the measured "
               "energy less the AC losses to the meter, less the inverters' energy the meter "
               "has no reading for, plus what the meter counted while the inverters logged "
               "nothing.")

METER_HEAD = ["Month", "Inverters [kWh]", "Meter [kWh]", "Difference [%]",
              "Design AC loss [%]"]
METER_LEAD = ("The inverters' sum against the export meter, month by month, over the intervals "
              "where both have energy (every figure a sum over the ledger). The difference is "
              "the AC losses between them (cabling, transformer) plus the two instruments' "
              "errors; read it against the design AC loss of the site file (meter.ac_loss_pct). "
              "A difference well beyond it, or one that changes from month to month, points "
              "at a fault on the AC side, a meter or a logger channel to check.")

EVENT_FIELDS = ["kind", "scope", "start", "end", "duration_h", "energy_loss_kwh",
                "energy_loss_kwh_low", "energy_loss_kwh_high", "method", "evidence_json"]


@dataclass(frozen=True)
class ReportSettings:
    """The site file's optional ``[report]`` section."""

    out_dir: str = "reports"  # monthly job's output root, relative to the site file
    underperformance_threshold_pct: float = 5.0  # monthly job: exit 1 when EPI < 1 - this/100
    critical_kinds: tuple[str, ...] = ("outage",)  # monthly job: exit 3 on any of these
    log_file: str = "perfcheck-monthly.log"  # relative to out_dir
    lock_wait_s: float = 300.0


def report_settings(site: Site) -> ReportSettings:
    """Read and validate ``[report]`` (key-path errors from :class:`perfcheck.site.Table`)."""
    t = Table(site.raw.get("report", {}), "report", site.path)
    d = ReportSettings()
    critical = t.get("critical_kinds", list, list(d.critical_kinds))
    bad = [k for k in critical if k not in kinds.NAMES]
    if bad:
        raise t._err("critical_kinds",
                     f"{bad[0]!r} is not an event kind ({', '.join(kinds.NAMES)})")
    s = ReportSettings(
        out_dir=t.get("out_dir", str, d.out_dir),
        underperformance_threshold_pct=t.number("underperformance_threshold_pct",
                                                d.underperformance_threshold_pct, lo=0, hi=100),
        critical_kinds=tuple(critical),
        log_file=t.get("log_file", str, d.log_file),
        lock_wait_s=t.number("lock_wait_s", d.lock_wait_s, lo=0, hi=86400),
    )
    t.done()
    return s


# --------------------------------------------------------------------------------------------
# content

# What a person reads for each stored quantity (see perfcheck.site.QUANTITIES).
QUANTITY_WORDS = {
    "ac_power_w": "AC power", "dc_power_w": "DC power", "energy_register_wh": "energy register",
    "energy_interval_wh": "interval energy", "poa_wm2": "plane-of-array irradiance",
    "ghi_wm2": "global horizontal irradiance", "dhi_wm2": "diffuse irradiance",
    "dni_wm2": "direct normal irradiance", "temp_air_c": "air temperature",
    "temp_module_c": "module temperature", "wind_speed_ms": "wind speed", "rain_mm": "rain",
}

# Unit suffixes of the names our JSON uses: (suffix, unit a person reads, factor).
UNIT_SUFFIXES = (
    ("_pct_of_expected", "% of expected", 1.0), ("_pct_per_year", "%/yr", 1.0),
    ("_pct_per_day", "%/day", 1.0), ("_pct", "%", 1.0),
    ("_kwh", "kWh", 1.0), ("_wh", "kWh", 1e-3), ("_kw", "kW", 1.0), ("_w", "kW", 1e-3),
    ("_wm2", "W/m²", 1.0), ("_deg", "°", 1.0), ("_c", "°C", 1.0), ("_h", "h", 1.0),
    ("_hours", "h", 1.0), ("_min", "min", 1.0), ("_s", "s", 1.0), ("_mm", "mm", 1.0),
    ("_kwp", "kWp", 1.0), ("_ms", "m/s", 1.0),
)
LABEL_WORDS = {"p": "p-", "ci95": "95 % interval", "poa": "plane-of-array irradiance",
               "ac": "AC", "dc": "DC", "epi": "EPI", "pr": "PR", "t": "T", "stc": "STC",
               "min": "minimum", "typ": "typical", "avg": "average", "temp": "temperature",
               "ref": "reference", "g": "irradiance"}


def label_unit(key: str) -> tuple[str, str, float]:
    """A JSON key as a label a person reads, its unit and the factor to that unit
    (``limit_w`` -> ("Limit", "kW", 0.001))."""
    unit, factor = "", 1.0
    for suffix, u, f in UNIT_SUFFIXES:
        if key.endswith(suffix) and len(key) > len(suffix):
            key, unit, factor = key[: -len(suffix)], u, f
            break
    words = [LABEL_WORDS.get(w, w) for w in key.split("_")]
    text = " ".join(words).replace("p- value", "p-value")
    return text[:1].upper() + text[1:], unit, factor


def number(v: float) -> str:
    """A number for a person: three significant digits, thousands separators, never
    scientific notation; below 0.0001 as "< 0.0001"."""
    if v == 0 or not math.isfinite(v):
        return "0" if v == 0 else "n/a"
    if abs(v) < 1e-4:
        return "< 0.0001" if v > 0 else "> -0.0001"
    digits = max(0, 2 - math.floor(math.log10(abs(v))))
    return f"{round(v, digits):,.{digits}f}"


def plain_value(key: str, v: Any, tz: str) -> str | None:
    """A value of the check document as a person reads it, with its unit; None for nested
    values (lists, tables) that have no one-cell form."""
    _, unit, factor = label_unit(key)
    if v is None:
        return "from the data"
    if key.endswith("p_value") and v == 0:  # underflowed: as the least a float holds
        return number(math.ulp(0.0))
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, (int, float)):
        text = str(v) if isinstance(v, int) and factor == 1 else number(v * factor)
        return f"{text} {unit}".strip() if unit not in ("°",) else f"{text}{unit}"
    if isinstance(v, str):
        if len(v) >= 16 and v[4:5] == "-" and v[10:11] == "T":  # an ISO 8601 instant
            return local_text(v, tz)
        return v.replace("_", " ")
    if isinstance(v, (list, tuple)) and all(isinstance(x, str) for x in v):
        return ", ".join(x.replace("_", " ") for x in v) or "none"
    return None


def fmt_interval(rec: dict, key: str, spec: str = "{:.3f}") -> str:
    """``value (low–high)``, the interval shown only when it is wider than the rounding;
    ``n/a`` for no value."""
    v = rec.get(key)
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return "n/a"
    lo, hi = rec.get(f"{key}_ci_low"), rec.get(f"{key}_ci_high")
    text = spec.format(v)
    if lo is not None and hi is not None and {spec.format(lo), spec.format(hi)} != {text}:
        text += f" ({spec.format(lo)}–{spec.format(hi)})"
    return text


def local_text(ts: str | pd.Timestamp, tz: str, with_time: bool = True) -> str:
    """Site-local time with its UTC offset (``2025-06-07 08:50+02:00``), or the local date."""
    t = pd.Timestamp(ts).tz_convert(tz)
    return t.isoformat(sep=" ", timespec="minutes") if with_time else f"{t:%Y-%m-%d}"


def day_text(t: pd.Timestamp) -> str:
    return f"{t.day} {t:%B %Y}"


def _bounds(result: dict, tz: str) -> tuple[pd.Timestamp, pd.Timestamp]:
    return (pd.Timestamp(result["period"]["start"]).tz_convert(tz),
            pd.Timestamp(result["period"]["end"]).tz_convert(tz))


def _is_month(start: pd.Timestamp, end: pd.Timestamp) -> bool:
    return start.day == 1 and start.hour == 0 and end == start + pd.DateOffset(months=1)


def period_text(result: dict, tz: str) -> str:
    """``June 2025`` or ``1 January 2023 to 31 December 2024`` (the last day included)."""
    start, end = _bounds(result, tz)
    if _is_month(start, end):
        return f"{start:%B %Y}"
    return f"{day_text(start)} to {day_text(end - pd.Timedelta(seconds=1))}"


def period_phrase(result: dict, tz: str) -> str:
    """The period opening a sentence: ``In June 2025`` or ``From 1 January 2023 to …``."""
    start, end = _bounds(result, tz)
    return f"In {period_text(result, tz)}" if _is_month(start, end) else \
        f"From {period_text(result, tz)}"


def scope_words(scope: str) -> str:
    return f"inverter {scope.split(':', 1)[1]}" if scope.startswith("inverter:") else "the plant"


def device_words(quantity: str, device: str) -> str:
    what = QUANTITY_WORDS.get(quantity, quantity.replace("_", " "))
    where = {"site": "at the site", "plant": "of the plant meter"}.get(device,
                                                                    f"of inverter {device}")
    return f"{what} {where}"


def top_cause(result: dict) -> dict | None:
    """The event that lost the most energy in the period (losses only, not design facts)."""
    events = [e for e in result.get("events", [])
              if e.get("energy_loss_kwh") and kinds.is_loss(e["kind"])]
    return max(events, key=lambda e: e["energy_loss_kwh"], default=None)


def no_data(result: dict) -> bool:
    """Whether no interval of the period has a measured and an expected value."""
    return result["metrics"]["period"].get("valid_intervals") == 0


def stopped_text(feeds: list[dict], tz: str) -> str:
    """Which feeds sent nothing in the period, grouped by when each last reported."""
    stopped = [f for f in feeds if not f["readings"]]
    if not feeds:
        return "no feed has reported yet"
    if not stopped:
        return ("readings arrived, but no interval has both a measured power and an "
                "irradiance to compare it with")
    groups: dict[str, list[str]] = {}
    for f in stopped:
        last = "never" if pd.isna(f["last_ts"]) else local_text(f["last_ts"], tz)
        groups.setdefault(last, []).append(device_words(f["quantity"], f["device"]))
    lead = "no feed reported" if len(stopped) == len(feeds) else "these feeds sent nothing"
    parts = [f"{', '.join(names)} (last reading: {last})"
             for last, names in sorted(groups.items(), reverse=True,
                                       key=lambda g: "" if g[0] == "never" else g[0])]
    return f"{lead}: " + "; ".join(parts)


def verdict(result: dict, tz: str, feeds: list[dict] | None = None) -> str:
    """One sentence with the key numbers: energy, shortfall, EPI, PR, PR', top cause; or
    what is missing when the period has too little data."""
    p = result["metrics"]["period"]
    when = period_text(result, tz)
    if no_data(result):
        why = stopped_text(feeds, tz) if feeds is not None else "no measured data"
        return f"No data for {when}: {why}. No verdict is possible for this period."
    if p.get("epi") is None:
        cov = p.get("coverage")
        cov_text = f" (data coverage {cov:.0%})" if cov is not None else ""
        if p.get("reason"):
            cov_text = f" ({p['reason']})"
        return (f"{when}: too little valid data for a verdict{cov_text}; see data coverage "
                "below.")
    short = p["expected_kwh"] - p["measured_kwh"]
    rel = short / p["expected_kwh"] if p["expected_kwh"] else 0.0
    words = "less" if short >= 0 else "more"
    at_meter = result.get("losses", {}).get("meter", {}).get("basis") == "meter"
    who = "the plant" if p.get("delivered_kwh") is None else "the plant's inverters"
    text = (f"{period_phrase(result, tz)} {who} delivered {p['measured_kwh']:,.0f} kWh, "
            f"{abs(rel):.1%} ({abs(short):,.0f} kWh) {words} than expected")
    if p.get("delivered_kwh") is not None:
        text += f", and {p['delivered_kwh']:,.0f} kWh reached the export meter"
    where = " at the meter" if at_meter else ""
    text += (f": EPI{where} {fmt_interval(p, 'epi')}, PR{where} {fmt_interval(p, 'pr')}, "
             f"temperature-corrected PR {fmt_interval(p, 'pr_temp_corrected')}")
    top = top_cause(result)
    if top is not None and short > 0:
        text += (f"; the largest cause found is {kinds.words(top['kind'])} on "
                 f"{scope_words(top['scope'])} ({_kwh_interval(top)})")
    cov = p.get("coverage")
    if cov is not None and cov < COVERED:
        text += (f". Data cover {cov:.0%} of the period's daylight intervals; the numbers hold "
                 "for that share")
    return text + "."


# A period counts as fully covered from this share of its daylight intervals (common
# practice: the rounding of a percentage shown without decimals).
COVERED = 0.995


def kwh(value: float | None, significant: int | None = None) -> str:
    """An energy for a person: whole kWh with thousands separators, one decimal below 10;
    from 100 kWh rounded to ``significant`` digits when given (an estimate with a band)."""
    if value is None:
        return "-"
    if abs(value) < 10:
        return f"{value:,.1f}"
    if significant and abs(value) >= 100:
        value = round(value, significant - 1 - math.floor(math.log10(abs(value))))
    return f"{value:,.0f}"


def _kwh_interval(ev: dict) -> str:
    """``412 kWh, 95 % band 360–470 kWh`` to three digits; ``under 1 kWh`` for a trace."""
    lo, hi, v = ev.get("energy_loss_kwh_low"), ev.get("energy_loss_kwh_high"), \
        ev["energy_loss_kwh"]
    if abs(v) < 0.5 and (hi is None or abs(hi) < 0.5):
        return "under 1 kWh"
    text = f"{kwh(v, 3)} kWh"
    if lo is not None and hi is not None and kwh(lo, 3) != kwh(hi, 3):
        text += f", 95 % band {kwh(lo, 3)}–{kwh(hi, 3)} kWh"
    return text


def _about(ev: dict) -> str:
    amount = _kwh_interval(ev)
    return amount if amount.startswith("under") else f"about {amount}"


def event_paragraph(ev: dict, tz: str) -> str:
    """What, where, when, how much (with its band), why we think so, what to check on site."""
    k = kinds.get(ev["kind"])
    where = scope_words(ev["scope"])
    when = f"from {local_text(ev['start'], tz)} to {local_text(ev['end'], tz)} (end excluded)"
    found = ""
    if ev.get("found_start") and (ev["found_start"], ev.get("found_end")) != (ev["start"],
                                                                             ev["end"]):
        found = (f"; the finding as a whole runs from {local_text(ev['found_start'], tz)} to "
                 f"{local_text(ev['found_end'], tz)}")
    what = f"{k.words[:1].upper()}{k.words[1:]} on {where}, {when}{found}."
    if k.ledger == "correction":
        much = " The data were at fault, not the plant; they were corrected and cost no energy."
    elif k.ledger == "design":
        much = (f" Not a loss: {_about(ev)} stayed out of the expected series by design.")
    else:
        much = f" Energy lost in this period: {_about(ev)}."
    if ev.get("reported_state"):
        who = "the inverters" if ev["scope"] == "plant" else "the inverter"
        much += f" Meanwhile {who} reported: {ev['reported_state']}."
    return (what + much + f" We think so because {k.why}. On site, check {k.check}.")


def stat_rows(ev: dict, tz: str) -> list[tuple[str, str]]:
    """The detector's statistics of one event as (label, value with unit) rows; a statistic
    without a value (one that does not apply to this finding) is left out."""
    skip = set(EVENT_FIELDS) | {"evidence", "found_start", "found_end"}
    fields = {**ev.get("evidence", {}), **{k: v for k, v in ev.items() if k not in skip}}
    rows = []
    for key, v in fields.items():
        text = None if v is None else plain_value(key, v, tz)
        if text is not None and key != "note":
            rows.append((label_unit(key)[0], text))
    return rows


def stats_table(events: list[dict], tz: str) -> list[list[str]]:
    """The appendix: every event's statistics, numbered as in the events table."""
    return [[str(i), kinds.words(e["kind"]), label, value]
            for i, e in enumerate(events, 1) for label, value in stat_rows(e, tz)]


def setting_rows(settings: dict, tz: str) -> list[list[str]]:
    """The settings of the check as (label, value with unit) rows."""
    rows = []
    for key, v in settings.items():
        if key in ("rules", "interval_method", "notes"):
            continue
        text = plain_value(key, v, tz)
        if text is not None:
            rows.append([label_unit(key)[0], text])
    return rows


def revision_text(r: dict, tz: str) -> str:
    """One revision of an earlier finding in plain words."""
    def span(x: dict) -> str:
        return (f"{local_text(x['start'], tz)} to {local_text(x['end'], tz)}, "
                f"{x['energy_loss_kwh']:,.1f} kWh")

    what = f"{kinds.words(r['kind'])} on {scope_words(r['scope'])}"
    when = local_text(r["revised_at"], tz)
    if r["change"] == "withdrawn":
        return f"Withdrawn on {when}: {what} ({span(r['before'])}); reason: {r['reason']}."
    if r["change"] == "found earlier":
        return (f"Found on {when} in data analysed before: {what} ({span(r['after'])}); "
                f"reason: {r['reason']}.")
    return (f"Revised on {when}: {what}, earlier {span(r['before'])}, now {span(r['after'])}; "
            f"reason: {r['reason']}.")


def quality_summary(aligned: pd.DataFrame, tz: str) -> list[dict]:
    """Per inverter: days with data, share of daylight intervals with a measured value, flags."""
    if aligned.empty:
        return []
    day = figures.local_days(aligned, tz)
    daylight = aligned["expected_ac_w"] > 0
    rows = []
    for inv, g in aligned.groupby("inverter_id", sort=True):
        lit = daylight[g.index]
        has = g["measured_ac_w"].notna()
        rows.append({
            "inverter_id": inv,
            "days_in_period": int(day.nunique()),
            "days_with_data": int(day[g.index][has].nunique()),
            "daylight_coverage": float(has[lit].mean()) if lit.any() else float("nan"),
            "rows_flagged": int((g["flags"].fillna("") != "").sum()),
            # the sensor's reading, in its own plane or carried to the others
            "poa_from_sensor": float(g["poa_source"].isin(("sensor", "translated")).mean()),
        })
    return rows


# The report lists this many quarantined lines; 'perfcheck quarantine' lists them all.
QUARANTINE_SHOWN = 50
QUARANTINE_HEAD = ["File", "Line", "Time (site-local)", "Reason", "The line as written"]
QUARANTINE_LEAD = ("Quarantined lines: lines of the logger files that could not be read as "
                   "readings. They are kept with their reason and never loaded; the raw files "
                   "are unchanged.")


def quarantine_more_text(n: int) -> str:
    return f"… and {n} more; 'perfcheck quarantine' lists them all."


def quarantine_rows(lines: list[dict], tz: str) -> list[list[str]]:
    """Quarantined lines as rows a person reads: file name, line, local time, reason and the
    line as written (cut at 80 characters)."""
    out = []
    for q in lines[:QUARANTINE_SHOWN]:
        raw = str(q["raw"])
        out.append([Path(str(q["file"])).name, str(q["line"]),
                    "" if pd.isna(q["ts"]) else local_text(q["ts"], tz), str(q["reason"]),
                    raw if len(raw) <= 80 else raw[:77] + "..."])
    return out


def db_quality(con: duckdb.DuckDBPyConnection, start: pd.Timestamp, end: pd.Timestamp) -> dict:
    """Files behind the period (with quarantined rows), quality flags, each feed's readings
    in the period (with its last reading) and the quarantined lines, from the database."""
    params = {"start": start.to_pydatetime(), "end": end.to_pydatetime()}
    out: dict[str, list[dict]] = {}
    for key, name in (("files", "report_files"), ("flags", "report_flags"),
                      ("feeds", "report_feeds"), ("quarantine", "report_quarantine")):
        try:
            out[key] = con.execute(db.sql(name), params).df().to_dict("records")
        except duckdb.CatalogException:  # the stage that writes this table has not run
            out[key] = []
    return out


def iso_instants(quality: dict, tz: str) -> dict:
    """The quality block with every instant as ISO 8601 with the site's offset (``T``)."""
    def iso(v: Any) -> Any:
        if isinstance(v, (pd.Timestamp, dt.datetime)):
            return None if pd.isna(v) else pd.Timestamp(v).tz_convert(tz).isoformat()
        return v

    return {k: [{f: iso(v) for f, v in r.items()} for r in rows] for k, rows in quality.items()}


def monthly_rows(monthly: list[dict]) -> list[list[str]]:
    rows = []
    for m in monthly:
        row = [m["month"]]
        if m.get("valid_intervals") == 0:  # no data: no 0 kWh that reads like a measurement
            rows.append(row + ["no data"] * (len(MONTHLY_COLUMNS) - 1) + ["0%"])
            continue
        for key, _, spec in MONTHLY_COLUMNS:
            row.append(fmt_interval(m, key, spec) if f"{key}_ci_low" in m else
                       _v(m.get(key), spec))
        rows.append(row)
    return rows


def events_csv(events: list[dict]) -> str:
    """The events as CSV with the stable columns of ``EVENT_FIELDS``."""
    buf = io.StringIO()
    w = csv.DictWriter(buf, EVENT_FIELDS, lineterminator="\n")
    w.writeheader()
    for ev in events:
        hours = (pd.Timestamp(ev["end"]) - pd.Timestamp(ev["start"])).total_seconds() / 3600
        row = {k: ev.get(k) for k in EVENT_FIELDS}
        row["duration_h"] = round(hours, 4)
        row["evidence_json"] = json.dumps(ev.get("evidence", {}), sort_keys=True)
        w.writerow(row)
    return buf.getvalue()


def records_csv(records: list[dict]) -> str:
    """A list of flat dicts as CSV, columns in first-seen order (nested values as JSON)."""
    cols: list[str] = []
    for r in records:
        cols += [k for k in r if k not in cols]
    buf = io.StringIO()
    w = csv.DictWriter(buf, cols, lineterminator="\n")
    w.writeheader()
    for r in records:
        w.writerow({k: json.dumps(v) if isinstance(v, (list, dict)) else v for k, v in r.items()})
    return buf.getvalue()


def context(site: Site, result: dict, aligned: pd.DataFrame, quality: dict) -> dict:
    """Everything the HTML template and the PDF pages show, in report order."""
    tz = site.timezone
    events = sorted(result.get("events", []), key=lambda e: (e["start"], e["kind"]))
    created = result.get("run", {}).get("created_at", "")
    return {
        "title": f"{site.name}: performance check, {period_text(result, tz)}",
        "site": site,
        "verdict": verdict(result, tz, quality.get("feeds")),
        "no_data": no_data(result),
        "tiles": _tiles(result),
        "per_inverter": quality_summary(aligned, tz),
        "files": quality.get("files", []),
        "quarantine": quarantine_rows(quality.get("quarantine", []), tz),
        "quarantine_more": max(0, len(quality.get("quarantine", [])) - QUARANTINE_SHOWN),
        "quarantine_head": QUARANTINE_HEAD, "quarantine_lead": QUARANTINE_LEAD,
        "quarantine_more_text": quarantine_more_text(
            max(0, len(quality.get("quarantine", [])) - QUARANTINE_SHOWN)),
        "unit_notes": units.words(result.get("data_quality", {})),
        "flags": [{**f, "quantity_words": device_words(f["quantity"], f["device"]),
                   "flag_words": f["flag"].replace("_", " ")} for f in quality.get("flags", [])],
        "monthly_head": ["Month"] + [h for _, h, _ in MONTHLY_COLUMNS],
        "monthly_rows": monthly_rows(result["metrics"]["monthly"]),
        "yields_note": YIELDS_NOTE,
        "events": [{**e, "no": i, "start_local": local_text(e["start"], tz),
                    "end_local": local_text(e["end"], tz), "kwh": _kwh_interval(e),
                    "kind_words": kinds.words(e["kind"]), "scope_words": scope_words(e["scope"]),
                    "paragraph": event_paragraph(e, tz)} for i, e in enumerate(events, 1)],
        "stats_rows": stats_table(events, tz),
        "guarantees": [guarantee_row(g) for g in result.get("guarantees", [])],
        "degradation_text": degradation_text(result.get("degradation") or {}),
        "figure_notes": {"soiling": soiling_limit_text(result.get("losses", {}))},
        "revisions": [revision_text(r, tz) for r in result.get("revisions", [])],
        "losses_rows": losses_rows(result.get("losses", {})),
        "losses_lead": LOSSES_LEAD,
        "plant_basis": result.get("settings", {}).get("plant_basis", ""),
        "meter_head": METER_HEAD, "meter_lead": METER_LEAD,
        "meter_rows": meter_rows(result["metrics"]),
        "methods": METHODS,
        "site_text": site.path.read_text(encoding="utf-8"),
        "site_file": site.path.name,
        "versions": versions.versions(),
        "settings_rows": setting_rows(result.get("settings", {}), tz),
        "confidence": result.get("settings", {}).get("confidence") or 0.95,
        "notes": result.get("settings", {}).get("notes", []),
        "rules": result.get("settings", {}).get("rules", []),
        "interval_method": result.get("settings", {}).get("interval_method", ""),
        "cautions": CAUTIONS,
        "created_at": local_text(created, tz) if created else "",
        "zone": tz,
    }


def losses_rows(losses: dict) -> list[list[str]]:
    """The losses block as table rows, from expected down to measured, every energy a sum over
    the ledger (the step chart draws the same numbers)."""
    if not losses or losses.get("expected_kwh") is None:
        return []
    rows = [["Expected (design at its ageing allowance)", f"{losses['expected_kwh']:,.1f}"]]
    rows += [[f"less {kinds.words(k)}", f"{v:,.1f}"]
             for k, v in losses.get("by_cause_kwh", {}).items()]
    rows.append(["less unexplained (model error and noise)", f"{losses['unexplained_kwh']:,.1f}"])
    rows.append(["Measured", f"{losses['measured_kwh']:,.1f}"])
    rows += [[f"Not a loss: {kinds.words(k)}", f"{v:,.1f}"]
             for k, v in losses.get("design_kwh", {}).items()]
    return rows + meter_loss_rows(losses.get("meter", {}))


def meter_loss_rows(m: dict) -> list[list[str]]:
    """From the inverters' measured energy down to the energy delivered at the export meter
    (the losses block's ``meter``), when the site has a meter."""
    if m.get("delivered_kwh") is None:
        return []
    rows = [[f"AC losses, inverters to meter (design {m['ac_loss_pct']:g} %: "
             f"{m['expected_ac_losses_kwh']:,.1f} kWh)", f"{m['ac_losses_kwh']:,.1f}"]]
    if m["not_metered_kwh"]:
        rows.append(["Inverter energy without a meter reading",
                     f"{m['not_metered_kwh']:,.1f}"])
    if m["without_inverter_data_kwh"]:
        rows.append(["Metered where the inverters logged nothing (logger gaps; shaped by "
                     "the expected power)", f"{m['without_inverter_data_kwh']:,.1f}"])
    rows.append(["Delivered at the export meter", f"{m['delivered_kwh']:,.1f}"])
    return rows


def meter_rows(metrics_block: dict) -> list[list[str]]:
    """The monthly reconciliation of the inverters' sum against the meter, and the period's
    total (empty without a meter)."""
    rows = []
    period = metrics_block.get("period", {})
    for label, m in [*((x["month"], x) for x in metrics_block.get("monthly", [])),
                     ("Period", period)]:
        r = m.get("meter")
        if not r:
            continue
        rows.append([label, f"{r['inverter_kwh']:,.0f}", f"{r['meter_kwh']:,.0f}",
                     _v(r["difference_pct"], "{:.2f}"), f"{r['expected_ac_loss_pct']:.2f}"])
    return rows


def degradation_text(d: dict) -> str:
    method = d.get("method", "year-on-year")
    if d.get("rate_pct_per_year") is None:
        return f"Degradation: {d.get('status', 'not enough data')} ({method})."
    return (f"Degradation: {d['rate_pct_per_year']:+.2f} %/yr (interval {d['ci_low']:+.2f} to "
            f"{d['ci_high']:+.2f}), {method}.")


def soiling_limit_text(losses: dict) -> str:
    """The least soiling loss per cycle the analysis could have found on this plant, in
    words (the losses block's ``soiling_detection_limit``, from
    :func:`perfcheck.detect.soiling.detection_limit`); empty where the analysis stored none."""
    lim = losses.get("soiling_detection_limit")
    if not lim:
        return ""
    if lim["loss_pct"] is None:
        return ("Soiling: too few days of the daily measured/expected index to say how small a "
                "soiling loss it could show.")
    rain = lim["washes_known_from_rain"]
    return (f"Soiling losses below {number(lim['loss_pct'])} % per cycle (the loss reached by "
            "the time a wash ends it) cannot be told from this plant's day-to-day noise"
            + (" when no rain reading marks the wash (a cleaning, or rain the gauge missed)"
               if rain else "")
            + f": the daily measured/expected index scatters by {number(lim['daily_sigma_pct'])}"
            f" % from day to day, and {'such a' if rain else 'a'} wash is found only as a step up "
            "of that index (a one-sided normal test over the "
            f"{lim['days']} days, false-alarm rate "
            f"{np.format_float_positional(lim['alpha'], trim='-')} in all). "
            + ("Between the washes the rain readings mark, a smaller decline can be found. "
               if rain else "")
            + "Smaller soiling may be present unreported, unless it continues a soiling episode "
            "found above that size; its energy is then part of the unexplained rest.")


def _as_shown(g: dict) -> dict:
    """A guarantee finding with the report's sign convention: a module warranty's promised
    and measured values as loss rates [%/yr], positive."""
    if g["kind"] != "module_warranty":
        return g

    def neg(v: float | None) -> float | None:
        return None if v is None else -v

    return {**g, "metric": "degradation_loss_pct_per_year", "promised": neg(g["promised"]),
            "measured": neg(g["measured"]), "measured_ci_low": neg(g.get("measured_ci_high")),
            "measured_ci_high": neg(g.get("measured_ci_low"))}


def guarantee_row(g: dict) -> dict:
    """A guarantee finding with the texts the report's table shows."""
    g = _as_shown(g)
    measured = _v(g.get("measured"), "{:.3f}")
    if g.get("measured_ci_low") is not None:
        measured += f" ({g['measured_ci_low']:.3f} to {g['measured_ci_high']:.3f})"
    kwh_short = g.get("energy_short_kwh")
    money = g.get("money_short")
    promised = _v(g.get("promised"), "{:.3f}")
    if g["kind"] == "module_warranty":
        promised, measured = f"loss ≤ {promised} %/yr", f"loss {measured} %/yr"
    return {**g, "promised_text": promised, "measured_text": measured,
            "energy_short_text": _v(kwh_short, "{:,.0f} kWh"),
            "finding_text": guarantees.LABELS[g["finding"]],
            "money_short_text": "n/a" if money is None else
            f"{money:,.2f} {g.get('currency', '')}".rstrip()}


def guarantees_csv(guarantees: list[dict]) -> str:
    """The guarantee findings as CSV, with the report's sign convention, energies to 0.1 kWh,
    money to the cent, shares to 0.1 % and other numbers to four significant digits."""
    def rounded(key: str, v: Any) -> Any:
        if not isinstance(v, float) or isinstance(v, bool):
            return v
        if "_kwh" in key:
            return round(v, 1)
        if key.endswith("_share"):
            return round(v, 3)
        if key.startswith("money") or key.startswith("price"):
            return round(v, 2 if key.startswith("money") else 4)
        return float(f"{v:.4g}")

    return records_csv([{k: rounded(k, v) for k, v in _as_shown(g).items()}
                        for g in guarantees])


def _tiles(result: dict) -> list[tuple[str, str, str]]:
    p, losses = result["metrics"]["period"], result.get("losses", {})
    if no_data(result):
        return [(k, "n/a", "no data") for k in ("EPI", "PR", "PR temp.-corrected", "Shortfall")]
    short = None
    if p.get("expected_kwh") is not None and p.get("measured_kwh") is not None:
        short = p["expected_kwh"] - p["measured_kwh"]
    return [
        ("EPI", _v(p.get("epi"), "{:.3f}"), _range(p, "epi", "{:.3f}")),
        ("PR", _v(p.get("pr"), "{:.3f}"), _range(p, "pr", "{:.3f}")),
        ("PR temp.-corrected", _v(p.get("pr_temp_corrected"), "{:.3f}"),
         _range(p, "pr_temp_corrected", "{:.3f}")),
        ("Shortfall" if short is None or short >= 0 else "Surplus",
         _v(None if short is None else abs(short), "{:,.0f} kWh"),
         f"unexplained {_v(losses.get('unexplained_kwh'), '{:,.0f} kWh')}"),
    ]


def _v(v: Any, spec: str) -> str:
    return "n/a" if v is None else spec.format(v)


def _range(p: dict, key: str, spec: str) -> str:
    lo, hi = p.get(f"{key}_ci_low"), p.get(f"{key}_ci_high")
    return "" if lo is None or hi is None else f"{spec.format(lo)} – {spec.format(hi)}"


# --------------------------------------------------------------------------------------------
# writers


def render_html(ctx: dict, pngs: dict[str, bytes]) -> str:
    env = jinja2.Environment(loader=jinja2.PackageLoader("perfcheck", "templates"),
                             autoescape=True, trim_blocks=True, lstrip_blocks=True)
    figs = [{"stem": stem, "caption": caption, "note": ctx["figure_notes"].get(stem, ""),
             "data": base64.b64encode(pngs[stem]).decode("ascii")}
            for stem, caption, _ in figures.FIGURES]
    return env.get_template("report.html.j2").render(**ctx, figures=figs)


def render(site: Site, result: dict, aligned: pd.DataFrame, quality: dict,
           out_dir: Path) -> dict[str, Path]:
    """Write the report files for an already computed check result; return their paths."""
    out_dir = Path(out_dir)
    (out_dir / "figures").mkdir(parents=True, exist_ok=True)
    ctx = context(site, result, aligned, quality)
    pixels, encoding, paths = {}, {}, {}
    # each figure drawn once, for the PDF and for its PNG; a second thread encodes the PNGs
    # while the next figure is drawn and the PDF written
    with ThreadPoolExecutor(1) as pool:
        for stem, _, build in figures.FIGURES:
            pixels[stem] = figures.pixels(build(aligned, result, site.timezone))
            encoding[stem] = pool.submit(figures.png, pixels[stem])
        pdf_path = out_dir / "report.pdf"
        pdf.write_pdf(pdf_text_blocks(ctx), pixels, pdf_path, ctx["title"])
        pngs = {stem: done.result() for stem, done in encoding.items()}
    for stem in pngs:
        paths[f"figure_{stem}"] = out_dir / "figures" / f"{stem}.png"
        paths[f"figure_{stem}"].write_bytes(pngs[stem])
    paths["html"] = out_dir / "report.html"
    paths["html"].write_text(render_html(ctx, pngs), encoding="utf-8")
    paths["pdf"] = pdf_path
    paths["json"] = out_dir / "check.json"
    paths["json"].write_text(dump_json(result), encoding="utf-8")
    paths["events_csv"] = out_dir / "events.csv"
    paths["events_csv"].write_text(events_csv(result.get("events", [])), encoding="utf-8")
    paths["monthly_csv"] = out_dir / "monthly.csv"
    paths["monthly_csv"].write_text(records_csv(result["metrics"]["monthly"]), encoding="utf-8")
    return paths


def dump_json(result: dict) -> str:
    """The check result as stable JSON text (sorted keys, two-space indent)."""
    return json.dumps(result, indent=2, sort_keys=True, allow_nan=False, default=str) + "\n"


def write_report(con: duckdb.DuckDBPyConnection, site: Site, start: pd.Timestamp,
                 end: pd.Timestamp, out_dir: Path, result: dict | None = None) -> dict[str, Path]:
    """Write the report of the period [start, end) into ``out_dir``, clipped from the stored
    analysis (brought up to date first), unless ``result``, the check document, is given.

    Returns the paths written, keyed ``html``, ``pdf``, ``json``, ``events_csv``, ``monthly_csv``
    and ``figure_<name>``.
    """
    if result is None:
        result = analysis.view(con, site, start, end, analysis.update(con, site))
    series = analysis.series(con, site, start, end)
    return render(site, result, series, db_quality(con, start, end), Path(out_dir))


def pdf_text_blocks(ctx: dict) -> list[tuple[str, Any]]:
    """The report's content as (kind, content) blocks for the PDF, in the HTML's order and
    with the HTML's numbers (a test compares the two)."""
    meta = (f"{ctx['site'].dc_kwp:.1f} kWp DC · {ctx['site'].ac_kw:.1f} kW AC · "
            f"{len(ctx['site'].inverters)} inverters · {ctx['zone']} · commissioned "
            f"{ctx['site'].commissioned}"
            + (f" · checked {ctx['created_at']}" if ctx["created_at"] else "")
            + " · times site-local with their UTC offset")
    b: list[tuple[str, Any]] = [("title", ctx["title"]), ("para", meta),
                                ("lead", ctx["verdict"])]
    b.append(("table", (["", *(k for k, _, _ in ctx["tiles"])],
                        [["value", *(v for _, v, _ in ctx["tiles"])],
                         ["interval", *(r for _, _, r in ctx["tiles"])]])))
    b.append(("h", "1  Data coverage and quality"))
    b.append(("table", (["Inverter", "Days with data", "Daylight intervals with a value",
                         "Flagged rows", "POA from sensor"],
                        [[r["inverter_id"], f"{r['days_with_data']} of {r['days_in_period']}",
                          f"{100 * r['daylight_coverage']:.1f} %", str(r["rows_flagged"]),
                          f"{100 * r['poa_from_sensor']:.0f} %"] for r in ctx["per_inverter"]])))
    if ctx["files"]:
        b.append(("para", "Logger files behind this period:"))
        b.append(("table", (["File", "Logger", "Rows read", "Loaded", "Duplicates",
                             "Quarantined"],
                            [[f["path"], f["logger"], str(f["rows_read"]), str(f["rows_loaded"]),
                              str(f["rows_duplicate"]), str(f["rows_quarantined"])]
                             for f in ctx["files"]])))
    if ctx["quarantine"]:
        b.append(("para", QUARANTINE_LEAD))
        b.append(("table", (QUARANTINE_HEAD, ctx["quarantine"])))
        if ctx["quarantine_more"]:
            b.append(("para", quarantine_more_text(ctx["quarantine_more"])))
    b += [("para", note) for note in ctx["unit_notes"]]
    if ctx["flags"]:
        b.append(("para", "Quality flags (readings are never deleted; flagged readings are left "
                          "out of the metrics):"))
        b.append(("table", (["Flag", "Reading", "Rows"],
                            [[f["flag_words"], f["quantity_words"], str(f["rows_flagged"])]
                             for f in ctx["flags"]])))
    b.append(("h", "2  Monthly values with intervals"))
    b.append(("table", (ctx["monthly_head"], ctx["monthly_rows"])))
    b.append(("para", f"Intervals at {100 * ctx['confidence']:.0f} % confidence in brackets, "
                      "shown where wider than the rounding. A month with too little valid data "
                      "shows n/a instead of a number."))
    b.append(("para", ctx["yields_note"]))
    if ctx["plant_basis"]:
        b.append(("para", f"Basis of the plant's figures: {ctx['plant_basis']}."))
    if ctx["meter_rows"]:
        b.append(("para", ctx["meter_lead"]))
        b.append(("table", (ctx["meter_head"], ctx["meter_rows"])))
    b.append(("h", "3  Figures"))
    b.append(("figures", ctx["figure_notes"]))
    b.append(("h", "4  Events"))
    if ctx["losses_rows"]:
        b.append(("para", ctx["losses_lead"]))
        b.append(("table", (["Where the expected energy went", "Energy [kWh]"],
                            ctx["losses_rows"])))
    if ctx["events"]:
        b.append(("table", (["No.", "Finding", "Where", "From", "To (end excluded)", "Energy"],
                            [[str(e["no"]), e["kind_words"], e["scope_words"], e["start_local"],
                              e["end_local"], e["kwh"]] for e in ctx["events"]])))
        for e in ctx["events"]:
            b.append(("para", f"{e['no']}. {e['kind_words'].upper()}, {e['scope_words']}: "
                      + e["paragraph"] + f" Method: {e['method']}."))
    else:
        b.append(("para", "No events were found in this period."))
    b.append(("para", ctx["degradation_text"]))
    if ctx["revisions"]:
        b.append(("para", "Revised findings:"))
        b += [("para", r) for r in ctx["revisions"]]
    n = 5
    if ctx["guarantees"]:
        b.append(("h", f"{n}  Guarantees and warranties"))
        b.append(("table", (["Promise", "Promised", "Measured (interval)", "Finding",
                             "Energy short [kWh]", "Money short"],
                            [[g["name"], g["promised_text"], g["measured_text"],
                              g["finding_text"], g["energy_short_text"],
                              g["money_short_text"]] for g in ctx["guarantees"]])))
        b += [("para", g["statement"]) for g in ctx["guarantees"]]
        n += 1
    b.append(("h", f"{n}  Methods and references"))
    b.append(("table", (["Quantity or finding", "Method and source"],
                        [list(m) for m in ctx["methods"]])))
    if ctx["rules"]:
        b.append(("para", "Rules of this check:"))
        b += [("para", f"- {r}") for r in ctx["rules"]]
    if ctx["interval_method"]:
        b.append(("para", f"Intervals: {ctx['interval_method']}."))
    for note in ctx["notes"]:
        b.append(("para", f"Note: {note}."))
    b.append(("para", "Settings of this check:"))
    b.append(("table", (["Setting", "Value"], ctx["settings_rows"])))
    if ctx["stats_rows"]:
        b.append(("para", "Appendix: the detectors' statistics"))
        b.append(("table", (["No.", "Finding", "Statistic", "Value"], ctx["stats_rows"])))
    b.append(("para", "Versions: " + ", ".join(f"{k} {v}" for k, v in ctx["versions"].items())
              + "."))
    b.append(("para", f"Site file used ({ctx['site_file']}):"))
    b.append(("pre", ctx["site_text"]))
    b.append(("h", f"{n + 1}  Cautions"))
    b += [("para", c) for c in ctx["cautions"]]
    b.append(("para", f"Written by perfcheck {ctx['versions']['perfcheck']}. All times are "
                      f"site-local ({ctx['zone']}) with their UTC offset."))
    return b
