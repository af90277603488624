"""``perfcheck check``: the monthly metrics table, and the whole check document as JSON."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import click

from perfcheck import kinds, progress
from perfcheck.errors import DataError
from perfcheck.site import Site

from .common import day_options, emit, json_option, json_target, lazy_module, site_argument

db = lazy_module("perfcheck.db")
analysis = lazy_module("perfcheck.analysis")
metrics = lazy_module("perfcheck.metrics")
report = lazy_module("perfcheck.report")
units = lazy_module("perfcheck.units")


def open_db(db_path: Path) -> Any:
    if not db_path.exists():
        raise DataError(f"{db_path}: no database yet (run 'perfcheck ingest' first)")
    return db.connect(db_path)


def _day(value: dt.datetime | None) -> dt.date | None:
    return None if value is None else value.date()


def _pct(value: float | None) -> str:
    return "  -  " if value is None else f"{100 * value:5.1f}"


def _band(row: dict[str, Any], key: str) -> str:
    """The value [%] and its interval, the interval only where it is wider than the rounding."""
    lo, hi = row.get(f"{key}_ci_low"), row.get(f"{key}_ci_high")
    band = "" if lo is None or hi is None else f"{100 * lo:.1f}-{100 * hi:.1f}"
    if band and f"{100 * lo:.1f}" == f"{100 * hi:.1f}":
        band = ""
    return f"{_pct(row[key])} {band:<12}"


def _num(value: float | None, width: int) -> str:
    return f"{'-':>{width}}" if value is None else f"{value:{width}.1f}"


HEADER = (f"{'':9}{'Yr':>6}{'Yf':>7}  {'PR %':<19}{'PR T-corr %':<19}{'PR weather %':<19}"
          f"{'EPI %':<19}{'avail %':<19}{'kWh/kWp':>7}  coverage")


def table_line(label: str, row: dict[str, Any]) -> str:
    """One line of the monthly table: yields [h], ratios [%] with their intervals."""
    cov = row["coverage"]
    coverage = (f"{_pct(cov)} % ({row['valid_intervals']}/{row['daylight_intervals']})"
                if cov is not None else "  -")
    if row["reason"]:
        return f"{label:<9}{'':13}  {row['reason']}; {coverage.strip()}"
    return (f"{label:<9}{_num(row['yr_h'], 6)}{_num(row['yf_h'], 7)}  "
            + "".join(f"{_band(row, k):<19}" for k in
                      ("pr", "pr_temp_corrected", "pr_weather_corrected", "epi", "availability"))
            + f"{_num(row['specific_yield_kwh_per_kwp'], 7)}  {coverage}")


def format_table(doc: dict[str, Any], site: Site) -> str:
    """The compact monthly table of a check document, plant level, with the period total."""
    s = doc["settings"]
    lines = [
        f"{site.name}: {doc['period']['start'][:10]} to {doc['period']['end'][:10]} (end "
        f"excluded, {site.timezone}); {site.dc_kwp:g} kWp, {len(site.inverters)} inverters",
        f"Yr, Yf in h; ratios in % with their {s['confidence']:.0%} interval (day-block "
        f"bootstrap, irradiance uncertainty {s['poa_uncertainty_pct']:g} % added); "
        f"PR T-corr at {s['pr_temp_ref_used_c']:.1f} C, weather at "
        f"{s['t_cell_typ_avg_used_c']:.1f} C",
        "",
        HEADER,
    ]
    lines += [table_line(m["month"], m) for m in doc["metrics"]["monthly"]]
    lines.append(table_line("period", doc["metrics"]["period"]))
    losses = doc["losses"]
    lines += ["", *findings_table(doc["events"], site.timezone), "",
              f"Expected {report.kwh(losses['expected_kwh'])} kWh, measured "
              f"{report.kwh(losses['measured_kwh'])} kWh, not explained by a finding "
              f"{report.kwh(losses['unexplained_kwh'])} kWh; guarantees checked: "
              f"{len(doc['guarantees'])}"]
    lines += meter_lines(losses.get("meter", {}), s.get("plant_basis"))
    limit = report.soiling_limit_text(losses)
    lines += [limit] if limit else []
    notes = units.words(doc.get("data_quality", {}))
    return "\n".join(lines + ([""] + notes if notes else []))


def meter_lines(m: dict[str, Any], basis: str | None) -> list[str]:
    """The basis of the plant's figures in words, and with a meter the way from the
    inverters' energy to the energy delivered there."""
    out = [f"Plant basis: {basis}"] if basis else []
    if m.get("delivered_kwh") is not None:
        out.append(f"At the export meter: delivered {report.kwh(m['delivered_kwh'])} kWh = "
                   f"inverters {report.kwh(m['inverter_kwh'])} - AC losses "
                   f"{report.kwh(m['ac_losses_kwh'])} (design {m['ac_loss_pct']:g} %: "
                   f"{report.kwh(m['expected_ac_losses_kwh'])}) - without a meter reading "
                   f"{report.kwh(m['not_metered_kwh'])} + metered without inverter data "
                   f"{report.kwh(m['without_inverter_data_kwh'])} kWh")
    return out


def local_minute(instant: str) -> str:
    """``2024-10-03 09:15+02:00`` from an ISO 8601 instant with its offset."""
    return dt.datetime.fromisoformat(instant).isoformat(sep=" ", timespec="minutes")


def _loss(ev: dict[str, Any]) -> str:
    """The energy with its band; 'none' for a finding that costs no energy (a sensor fault)."""
    values = (ev["energy_loss_kwh"], ev["energy_loss_kwh_low"], ev["energy_loss_kwh_high"])
    if not any(values):
        return "none"
    return f"{report.kwh(values[0], 3)} ({report.kwh(values[1], 3)} to {report.kwh(values[2], 3)})"


def findings_table(events: list[dict[str, Any]], zone: str) -> list[str]:
    """One line per event: kind in words, where, start and end (site-local time with its
    offset, end excluded) and the energy lost with its 95 % band, to three digits."""
    if not events:
        return ["Findings: none."]
    head = ("finding", "where", "from", "to (excluded)", "energy [kWh] (95 % band)")
    rows = [(kinds.words(ev["kind"]), report.scope_words(ev["scope"]),
             local_minute(ev["start"]), local_minute(ev["end"]), _loss(ev))
            for ev in sorted(events, key=lambda e: (e["start"], e["kind"], e["scope"]))]
    widths = [max(len(r[i]) for r in [head, *rows]) for i in range(len(head) - 1)]
    return [f"Findings: {len(events)} (times in {zone}, with the UTC offset)",
            *("  ".join(f"{c:<{w}}" for c, w in zip(r, widths, strict=False)) + "  " + r[-1]
              for r in [head, *rows])]


@click.command("check")
@site_argument
@day_options("First day, site-local (YYYY-MM-DD; default: first data).",
             "Last day, site-local, included (YYYY-MM-DD; default: last data).")
@json_option("the whole check document (metrics, events, losses, degradation, guarantees)")
def check_command(site: Site, db_path: Path, date_from: dt.datetime | None,
                  date_to: dt.datetime | None, json_path: Path | None) -> None:
    """Yields, performance ratios (plain, temperature- and weather-corrected), EPI,
    availability, specific yield and data coverage per month, each with its interval, then
    the events and the loss balance, clipped from the analysis of the whole history (made
    first if the data, the model or the site file changed since the last one). The filtering
    rules come from the optional [metrics] table of the site file. A period without data
    ends with the exit code 1.

    \b
    Example:
      perfcheck check site.toml --from 2025-06-01 --to 2025-06-30 --json june.json
    """
    json_target(json_path)
    con = open_db(db_path)
    try:
        with progress.stage("check: metrics and findings"):
            start, end = metrics.resolve_period(con, site, _day(date_from), _day(date_to))
            doc = analysis.view(con, site, start, end, analysis.update(con, site))
            missing = report.no_data(doc) and report.verdict(
                doc, site.timezone, report.db_quality(con, start, end)["feeds"])
    finally:
        con.close()
    emit(format_table(doc, site), doc, json_path)
    if missing:  # said on stderr, so that stdout keeps the table or the JSON alone
        click.echo(f"perfcheck: {missing}", err=True)
        raise click.exceptions.Exit(1)


COMMANDS = [check_command]
