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
import io
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb
import jinja2
import numpy as np
import pandas as pd

from perfcheck import analysis, db, figures, kinds, pdf, versions
from perfcheck.site import Site, Table

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
     "(King et al. 2004, SAND2004-3535), Dobos 2014 DC and inverter models"),
    ("Availability, time- and energy-based", "IEC TS 63019:2019 (from memory)"),
    ("Intervals on PR and EPI", "day-block bootstrap (whole days resampled, seeded) plus the "
     "irradiance sensor's stated uncertainty (IEC 61724-1 sensor class)"),
    ("Underperformance periods", "robust regression of measured on expected power (statsmodels) "
     "on a reference window; CUSUM (Page 1954) on the AR(1) innovations of the daily "
     "residuals, scaled by their long-run variance"),
    ("Soiling", "Deceglie, Micheli & Muller 2018, IEEE J. Photovolt. 8(2):547 (stochastic rate "
     "and recovery, in its spirit)"),
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

LOSSES_LEAD = ("Where the expected energy went: every energy in this report is a sum over one "
               "ledger of the intervals that have both a measured and an expected value, so "
               "expected less the causes and the unexplained rest is the measured energy.")

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


def fmt_interval(rec: dict, key: str, spec: str = "{:.3f}") -> str:
    """``value (low-high)`` or ``n/a``."""
    v = rec.get(key)
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return "n/a"
    lo, hi = rec.get(f"{key}_ci_low"), rec.get(f"{key}_ci_high")
    text = spec.format(v)
    if lo is not None and hi is not None:
        text += f" ({spec.format(lo)}–{spec.format(hi)})"
    return text


def local_text(ts: str | pd.Timestamp, tz: str, with_time: bool = True) -> str:
    t = pd.Timestamp(ts).tz_convert(tz)
    return f"{t:%Y-%m-%d %H:%M}" if with_time else f"{t:%Y-%m-%d}"


def period_text(result: dict, tz: str) -> str:
    start = pd.Timestamp(result["period"]["start"]).tz_convert(tz)
    end = pd.Timestamp(result["period"]["end"]).tz_convert(tz)
    if start.day == 1 and end == start + pd.DateOffset(months=1) and start.hour == 0:
        return f"{start:%B %Y}"
    return f"{start:%d %B %Y} to {end - pd.Timedelta(seconds=1):%d %B %Y}"


def scope_words(scope: str) -> str:
    return f"inverter {scope.split(':', 1)[1]}" if scope.startswith("inverter:") else "the plant"


def top_cause(result: dict) -> dict | None:
    """The event that lost the most energy in the period (losses only, not design facts)."""
    events = [e for e in result.get("events", [])
              if e.get("energy_loss_kwh") and kinds.is_loss(e["kind"])]
    return max(events, key=lambda e: e["energy_loss_kwh"], default=None)


def verdict(result: dict, tz: str) -> str:
    """One sentence with the key numbers: energy, shortfall, EPI, PR, PR', top cause."""
    p = result["metrics"]["period"]
    when = period_text(result, tz)
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
    text = (f"In {when} the plant delivered {p['measured_kwh']:,.0f} kWh, {abs(rel):.1%} "
            f"({abs(short):,.0f} kWh) {words} than expected: EPI {fmt_interval(p, 'epi')}, "
            f"PR {fmt_interval(p, 'pr')}, temperature-corrected PR "
            f"{fmt_interval(p, 'pr_temp_corrected')}")
    top = top_cause(result)
    if top is not None and short > 0:
        text += (f"; the largest cause found is {kinds.words(top['kind'])} on "
                 f"{scope_words(top['scope'])} ({_kwh_interval(top)})")
    return text + "."


def _kwh_interval(ev: dict) -> str:
    lo, hi = ev.get("energy_loss_kwh_low"), ev.get("energy_loss_kwh_high")
    text = f"{ev['energy_loss_kwh']:,.0f} kWh"
    return text + (f", {lo:,.0f}–{hi:,.0f}" if lo is not None and hi is not None else "")


def event_paragraph(ev: dict, tz: str) -> str:
    """What we saw, why we think it is this kind, what to check on site."""
    k = kinds.get(ev["kind"])
    when = (f"From {local_text(ev['start'], tz)} to {local_text(ev['end'], tz)} "
            f"{scope_words(ev['scope'])}")
    if k.ledger == "correction":
        saw = f"{when}: the data were at fault, not the plant; they were corrected and cost no " \
              "energy."
    elif k.ledger == "design":
        saw = f"{when} kept about {_kwh_interval(ev)} out of the expected series by design " \
              "(not a loss)."
    else:
        saw = f"{when} lost about {_kwh_interval(ev)}."
    if ev.get("reported_state"):
        who = "the inverters" if ev["scope"] == "plant" else "the inverter"
        saw += f" Meanwhile {who} reported: {ev['reported_state']}."
    extra = {k: v for k, v in ev.items()  # the detector's details
             if k not in EVENT_FIELDS and k != "reported_state"}
    stats = ", ".join(f"{k.replace('_', ' ')} {_short(v)}"
                      for k, v in {**ev.get("evidence", {}), **extra}.items()
                      if v is not None and not isinstance(v, (list, dict)))
    because = f" We think it is {k.words} because {k.why}"
    because += f" ({ev.get('method', 'method not stated')}{'; ' + stats if stats else ''})."
    return saw + because + f" On site, check {k.check}."


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


def _short(v: Any) -> str:
    if isinstance(v, float):
        return f"{v:.3g}"
    return str(v)


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
            "poa_from_sensor": float((g["poa_source"] == "sensor").mean()),
        })
    return rows


def db_quality(con: duckdb.DuckDBPyConnection, start: pd.Timestamp, end: pd.Timestamp) -> dict:
    """Files behind the period (with quarantined rows) and quality flags, from the database."""
    params = {"start": start.to_pydatetime(), "end": end.to_pydatetime()}
    out: dict[str, list[dict]] = {}
    for key, name in (("files", "report_files"), ("flags", "report_flags")):
        try:
            out[key] = con.execute(db.sql(name), params).df().to_dict("records")
        except duckdb.CatalogException:  # the stage that writes this table has not run
            out[key] = []
    return out


def monthly_rows(monthly: list[dict]) -> list[list[str]]:
    rows = []
    for m in monthly:
        row = [m["month"]]
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
    return {
        "title": f"{site.name}: performance check, {period_text(result, tz)}",
        "site": site,
        "verdict": verdict(result, tz),
        "tiles": _tiles(result["metrics"]["period"], result.get("losses", {})),
        "per_inverter": quality_summary(aligned, tz),
        "files": quality.get("files", []),
        "flags": quality.get("flags", []),
        "monthly_head": ["Month"] + [h for _, h, _ in MONTHLY_COLUMNS],
        "monthly_rows": monthly_rows(result["metrics"]["monthly"]),
        "events": [{**e, "start_local": local_text(e["start"], tz),
                    "end_local": local_text(e["end"], tz), "kwh": _kwh_interval(e),
                    "kind_words": kinds.words(e["kind"]), "scope_words": scope_words(e["scope"]),
                    "paragraph": event_paragraph(e, tz)} for e in events],
        "guarantees": [guarantee_row(g) for g in result.get("guarantees", [])],
        "degradation_text": degradation_text(result.get("degradation") or {}),
        "revisions": [revision_text(r, tz) for r in result.get("revisions", [])],
        "losses_rows": losses_rows(result.get("losses", {})),
        "losses_lead": LOSSES_LEAD,
        "methods": METHODS,
        "site_text": site.path.read_text(encoding="utf-8"),
        "site_file": site.path.name,
        "versions": versions.versions(),
        "settings": {k: v for k, v in result.get("settings", {}).items()
                     if k not in ("rules", "interval_method", "notes")},
        "notes": result.get("settings", {}).get("notes", []),
        "rules": result.get("settings", {}).get("rules", []),
        "interval_method": result.get("settings", {}).get("interval_method", ""),
        "cautions": CAUTIONS,
        "created_at": result.get("run", {}).get("created_at", ""),
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
    return rows


def degradation_text(d: dict) -> str:
    method = d.get("method", "year-on-year")
    if d.get("rate_pct_per_year") is None:
        return f"Degradation: {d.get('status', 'not enough data')} ({method})."
    return (f"Degradation: {d['rate_pct_per_year']:+.2f} %/yr (interval {d['ci_low']:+.2f} to "
            f"{d['ci_high']:+.2f}), {method}.")


def guarantee_row(g: dict) -> dict:
    """A guarantee finding with the texts the report's table shows."""
    spec = "{:.4g}"
    if g["kind"] == "module_warranty":  # shown as loss rates [%/yr], positive
        g = {**g, "promised": -g["promised"], "measured": None if g["measured"] is None else
             -g["measured"], "measured_ci_low": None if g.get("measured_ci_high") is None else
             -g["measured_ci_high"], "measured_ci_high": None if g.get("measured_ci_low") is None
             else -g["measured_ci_low"]}
    measured = _v(g.get("measured"), spec)
    if g.get("measured_ci_low") is not None:
        measured += f" ({_v(g['measured_ci_low'], spec)} to {_v(g['measured_ci_high'], spec)})"
    kwh = g.get("energy_short_kwh")
    money = g.get("money_short")
    promised = _v(g.get("promised"), spec)
    if g["kind"] == "module_warranty":
        promised, measured = f"loss ≤ {promised} %/yr", f"loss {measured} %/yr"
    return {**g, "promised_text": promised, "measured_text": measured,
            "energy_short_text": _v(kwh, "{:,.0f} kWh"),
            "money_short_text": "n/a" if money is None else
            f"{money:,.2f} {g.get('currency', '')}".rstrip()}


def _tiles(p: dict, losses: dict) -> list[tuple[str, str, str]]:
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
    figs = [{"stem": stem, "caption": caption,
             "data": base64.b64encode(pngs[stem]).decode("ascii")}
            for stem, caption, _ in figures.FIGURES]
    return env.get_template("report.html.j2").render(**ctx, figures=figs)


def render(site: Site, result: dict, aligned: pd.DataFrame, quality: dict,
           out_dir: Path) -> dict[str, Path]:
    """Write the report files for an already computed check result; return their paths."""
    out_dir = Path(out_dir)
    (out_dir / "figures").mkdir(parents=True, exist_ok=True)
    ctx = context(site, result, aligned, quality)
    pngs, paths = {}, {}
    for stem, _, build in figures.FIGURES:
        pngs[stem] = figures.png_bytes(build(aligned, result, site.timezone))
        paths[f"figure_{stem}"] = out_dir / "figures" / f"{stem}.png"
        paths[f"figure_{stem}"].write_bytes(pngs[stem])
    paths["html"] = out_dir / "report.html"
    paths["html"].write_text(render_html(ctx, pngs), encoding="utf-8")
    paths["pdf"] = out_dir / "report.pdf"
    pdf.write_pdf(pdf_text_blocks(ctx), pngs, paths["pdf"], ctx["title"])
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
    """The report's text as (kind, content) blocks for the PDF, in report order."""
    b: list[tuple[str, Any]] = [("title", ctx["title"]), ("lead", ctx["verdict"])]
    b.append(("h", "Data coverage and quality"))
    b.append(("table", (["Inverter", "Days with data", "Daylight coverage", "Flagged rows",
                         "POA from sensor"],
                        [[r["inverter_id"], f"{r['days_with_data']} of {r['days_in_period']}",
                          f"{r['daylight_coverage']:.1%}", str(r["rows_flagged"]),
                          f"{r['poa_from_sensor']:.0%}"] for r in ctx["per_inverter"]])))
    if ctx["files"]:
        b.append(("table", (["Logger file", "Rows loaded", "Quarantined", "Duplicates"],
                            [[Path(f["path"]).name, str(f["rows_loaded"]),
                              str(f["rows_quarantined"]), str(f["rows_duplicate"])]
                             for f in ctx["files"]])))
    b.append(("h", "Monthly values with intervals"))
    b.append(("monthly", (ctx["monthly_head"], ctx["monthly_rows"])))
    b.append(("figures", None))
    b.append(("h", "Events"))
    if ctx["losses_rows"]:
        b.append(("para", LOSSES_LEAD))
        b.append(("table", (["Where the expected energy went", "Energy [kWh]"],
                            ctx["losses_rows"])))
    if not ctx["events"]:
        b.append(("para", "No events were found in this period."))
    for e in ctx["events"]:
        b.append(("para", f"{kinds.words(e['kind']).upper()}, {scope_words(e['scope'])}: "
                  + e["paragraph"]))
    b.append(("para", ctx["degradation_text"]))
    if ctx["revisions"]:
        b.append(("h", "Revised findings"))
        for r in ctx["revisions"]:
            b.append(("para", r))
    if ctx["guarantees"]:
        b.append(("h", "Guarantees and warranties"))
        b.append(("table", (["Promise", "Promised", "Measured (interval)", "Finding",
                             "Energy short", "Money short"],
                            [[g["name"], g["promised_text"], g["measured_text"],
                              g["finding"].replace("_", " "), g["energy_short_text"],
                              g["money_short_text"]] for g in ctx["guarantees"]])))
        for g in ctx["guarantees"]:
            b.append(("para", g["statement"]))
    b.append(("h", "Methods and references"))
    for name, source in ctx["methods"]:
        b.append(("para", f"{name}: {source}."))
    for rule in ctx["rules"]:
        b.append(("para", f"Rule: {rule}."))
    if ctx["interval_method"]:
        b.append(("para", f"Intervals: {ctx['interval_method']}."))
    for note in ctx["notes"]:
        b.append(("para", f"Note: {note}."))
    if ctx["settings"]:
        b.append(("table", (["Setting", "Value"],
                            [[k, str(v)] for k, v in ctx["settings"].items()])))
    b.append(("para", "Versions: " + ", ".join(f"{k} {v}" for k, v in ctx["versions"].items())))
    b.append(("h", f"Site file used ({ctx['site_file']})"))
    b.append(("pre", ctx["site_text"]))
    b.append(("h", "Cautions"))
    for c in ctx["cautions"]:
        b.append(("para", c))
    return b
