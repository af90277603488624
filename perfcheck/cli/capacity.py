"""``perfcheck capacity``: the ASTM E2848 capacity test for acceptance after commissioning."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import click

from perfcheck import progress
from perfcheck.site import Site

from .check import open_db
from .common import (
    UserError,
    day_options,
    emit,
    json_option,
    json_target,
    lazy_module,
    site_argument,
)

capacity = lazy_module("perfcheck.capacity")
metrics = lazy_module("perfcheck.metrics")


SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def coef(v: float) -> str:
    """A coefficient to five digits, very small or large ones as m×10ⁿ (never 1e-06)."""
    if v == 0 or 1e-3 <= abs(v) < 1e5:
        return f"{v:.5g}"
    mantissa, exponent = f"{v:.4e}".split("e")
    return f"{mantissa}×10{str(int(exponent)).translate(SUPERSCRIPT)}"


def format_report(doc: dict[str, Any]) -> str:
    """The short text report of a capacity document."""
    rc, r = doc["reporting_conditions"], doc["result"]
    m, e = doc["regression"]["measured"], doc["regression"]["expected"]
    lines = [
        f"Capacity test, {doc['site']['name']} ({doc['site']['dc_kwp']:g} kWp DC, "
        f"{doc['site']['ac_kw']:g} kW AC)",
        f"Method: {doc['test']['method']}",
        f"Window: {doc['test']['start']} to {doc['test']['end']} (end excluded); points used "
        f"{doc['points']}, {doc['test']['first_point']} to {doc['test']['last_point']}",
        f"Reporting conditions: {rc['poa_wm2']:.0f} W/m2, {rc['temp_air_c']:.1f} C, "
        f"{rc['wind_speed_ms']:.1f} m/s ({rc['source']})",
        "Filters (points left after each):",
        *(f"  {f['points']:>7}  {f['rule']}" for f in doc["filters"]),
        "Regression P = E (a1 + a2 E + a3 T_a + a4 v), P in kW:",
        *(f"  {name:<9} a1 {coef(fit['coefficients']['a1'])}  a2 "
          f"{coef(fit['coefficients']['a2'])}  a3 {coef(fit['coefficients']['a3'])}  a4 "
          f"{coef(fit['coefficients']['a4'])}  "
          f"R2 {fit['r_squared']:.4f}  residual sd {fit['residual_std_kw']:.3g} kW"
          for name, fit in (("measured", m), ("expected", e))),
        f"Measured capacity at RC: {r['measured_capacity_kw']:.2f} kW "
        f"({r['measured_capacity_kw_ci_low']:.2f} to {r['measured_capacity_kw_ci_high']:.2f})",
        f"Expected capacity at RC: {r['expected_capacity_kw']:.2f} kW "
        f"({r['expected_capacity_kw_ci_low']:.2f} to {r['expected_capacity_kw_ci_high']:.2f})",
        f"Ratio: {r['ratio']:.4f} ({r['ratio_ci_low']:.4f} to {r['ratio_ci_high']:.4f}, with "
        f"the irradiance sensor's {r['irradiance_uncertainty_pct']:g} % calibration "
        "uncertainty); "
        f"guaranteed {r['guaranteed_ratio']:.4f}: {'PASS' if r['passed'] else 'FAIL'}"
        + ("" if r["significant"] else " (not significant: the interval straddles it)"),
        "",
        *(f"Caution: {c}" for c in doc["cautions"]),
    ]
    return "\n".join(lines)


@click.command("capacity")
@site_argument
@day_options("First day of the test window, site-local (YYYY-MM-DD).",
             "Last day of the test window, site-local, included.", required=True)
@click.option("--guaranteed-ratio", type=click.FloatRange(0.5, 1.2), default=0.97,
              show_default=True, help="Pass when measured / expected capacity is at least this.")
@json_option("the test document")
@click.option("--rc-poa", type=click.FloatRange(100, 1500), default=None,
              help="Reporting irradiance [W/m2] (default: from the window, ASTM E2939).")
@click.option("--rc-temp", type=click.FloatRange(-40, 60), default=None,
              help="Reporting ambient temperature [C].")
@click.option("--rc-wind", type=click.FloatRange(0, 40), default=None,
              help="Reporting wind speed [m/s].")
@click.option("--min-points", type=click.IntRange(10, 100_000), default=50, show_default=True,
              help="Fewest filtered points the regression may use.")
def capacity_command(site: Site, db_path: Path, date_from: dt.datetime, date_to: dt.datetime,
                     guaranteed_ratio: float, json_path: Path | None, rc_poa: float | None,
                     rc_temp: float | None, rc_wind: float | None, min_points: int) -> None:
    """Capacity test for acceptance: regress the plant's AC power on irradiance, ambient
    temperature and wind (ASTM E2848) over filtered points of the window, evaluate it at
    reporting conditions (ASTM E2939, or given), do the same for the expected series, and
    compare their ratio with the guaranteed ratio.

    \b
    Example:
      perfcheck capacity site.toml --from 2025-04-01 --to 2025-04-14 \\
        --guaranteed-ratio 0.97 --json capacity.json
    """
    given = [v is not None for v in (rc_poa, rc_temp, rc_wind)]
    if any(given) and not all(given):
        raise UserError("--rc-poa, --rc-temp and --rc-wind go together: give all three or none")
    rc = ({"poa_wm2": rc_poa, "temp_air_c": rc_temp, "wind_speed_ms": rc_wind}
          if all(given) else None)
    json_target(json_path)
    settings = capacity.CapacitySettings(min_points=min_points)
    con = open_db(db_path)
    try:
        with progress.stage("capacity: filters and regressions"):
            start, end = metrics.resolve_period(con, site, date_from.date(), date_to.date())
            doc = capacity.run(con, site, start, end, guaranteed_ratio, rc, settings)
    finally:
        con.close()
    emit(format_report(doc), doc, json_path)


COMMANDS = [capacity_command]
