"""Capacity test for acceptance after commissioning: ASTM E2848 at ASTM E2939 conditions.

The plant's AC power is regressed on plane-of-array irradiance, ambient temperature and wind,
P = E (a1 + a2 E + a3 T_a + a4 v), over filtered intervals of a test window; the fitted model is
evaluated at the reporting conditions (RC) with the 95 % interval of the mean prediction. The
expected series (the model of the site's design) is regressed the same way on the same points,
so the ratio measured / expected at RC compares like with like. The plant's irradiance is the
P0-weighted mean of its inverters' plane-of-array irradiance (as for the metrics).

A bias of the irradiance sensor does not cancel in the ratio: the expected power is computed
from the measured irradiance, so a sensor reading 3 % high makes the expected power about 3 %
high and the ratio about 3 % low, while the measured power does not change. The ratio's
interval therefore adds the sensor's expanded calibration uncertainty (``[model]
poa_uncertainty_pct``, by default that of ``[model] sensor_class``), relative, in quadrature
with the relative half-widths of the two regressions at RC (JCGM 100:2008, GUM, 5.1.2 and 5.1.6:
for a ratio the relative uncertainties add in quadrature; the three are independent).

Filters (each reported with the points left after it):

1. valid: every inverter has measured and expected power, irradiance, air temperature and wind,
   with no quality flag; daytime: irradiance above 0;
2. all inverters running: each inverter's AC power at least 1 % of its rating (the test measures
   the plant's capacity, not its availability; down intervals are counted, not hidden);
3. no clipping: every inverter's measured and unlimited expected power below
   ``clip_fraction`` of its AC rating, and the plant below that share of its export limit;
4. no curtailment: outside the curtailment windows given (from the detect stage);
5. stable sky: coefficient of variation of the irradiance over a centred window of at least
   ``stable_window_s`` (and three intervals) at most ``stable_cv_max``;
6. irradiance within +/- ``band_pct`` of the RC irradiance (ASTM E2848, from memory);
7. at least ``min_points`` points (common practice, no source), otherwise the test is refused.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass
from statistics import NormalDist
from typing import Any

import duckdb
import numpy as np
import pandas as pd

from perfcheck import analysis, metrics
from perfcheck.detect.common import Z95
from perfcheck.errors import DataError
from perfcheck.site import Site

TERMS = ("a1", "a2", "a3", "a4")


@dataclass(frozen=True)
class CapacitySettings:
    """Filter and reporting-condition settings; defaults are stated in the module docstring."""

    band_pct: float = 20.0  # ASTM E2848 irradiance band around RC (from memory)
    rc_min_poa_wm2: float = 400.0  # RC chosen from intervals above this (ASTM E2939, from memory)
    rc_percentile: float = 60.0  # RC irradiance percentile (ASTM E2939 as applied, from memory)
    stable_window_s: float = 900.0  # common practice, no source
    stable_cv_max: float = 0.05  # common practice, no source
    clip_fraction: float = 0.98  # common practice, no source
    running_fraction: float = 0.01  # common practice, no source
    min_points: int = 50  # common practice, no source
    confidence: float = 0.95


def e2848_design(poa: Any, temp_air: Any, wind_speed: Any) -> np.ndarray:
    """Design matrix of the ASTM E2848 model: columns E, E^2, E T_a, E v.

    Parameters
    ----------
    poa : plane-of-array irradiance E [W/m^2]
    temp_air : ambient temperature T_a [C]
    wind_speed : wind speed v [m/s]

    References
    ----------
    ASTM E2848-13, Standard Test Method for Reporting Photovoltaic Non-Concentrator System
    Performance (regression form from memory; its PVUSA origin confirmed).
    """
    e = np.asarray(poa, dtype=float)
    return np.column_stack([e, e * e, e * np.asarray(temp_air, dtype=float),
                            e * np.asarray(wind_speed, dtype=float)])


def fit_e2848(poa: Any, temp_air: Any, wind_speed: Any, power: Any) -> Any:
    """Ordinary least squares fit of P = E (a1 + a2 E + a3 T_a + a4 v), no intercept.

    Parameters
    ----------
    poa : [W/m^2]; temp_air : [C]; wind_speed : [m/s]
    power : AC power in the unit the capacity is wanted in (e.g. [kW])

    Returns
    -------
    statsmodels RegressionResults (params a1..a4, bse, rsquared, get_prediction).

    References
    ----------
    ASTM E2848-13 (from memory, see :func:`e2848_design`).
    """
    # the module called, not statsmodels.api (which loads its plots, time series and formulas)
    from statsmodels.regression.linear_model import OLS

    return OLS(np.asarray(power, dtype=float), e2848_design(poa, temp_air, wind_speed)).fit()


def capacity_at(fit: Any, rc: Mapping[str, float], confidence: float = 0.95) -> dict[str, float]:
    """The fitted power at reporting conditions with the interval of the mean prediction.

    Parameters
    ----------
    fit : result of :func:`fit_e2848`
    rc : poa_wm2 [W/m^2], temp_air_c [C], wind_speed_ms [m/s]
    confidence : two-sided level of the interval

    Returns
    -------
    dict value, low, high (in the unit of the fitted power).
    """
    x = e2848_design([rc["poa_wm2"]], [rc["temp_air_c"]], [rc["wind_speed_ms"]])
    pred = fit.get_prediction(x)
    low, high = pred.conf_int(alpha=1.0 - confidence)[0]
    return {"value": float(pred.predicted_mean[0]), "low": float(low), "high": float(high)}


def reporting_conditions(
    poa: pd.Series, temp_air: pd.Series, wind_speed: pd.Series, settings: CapacitySettings
) -> dict[str, float]:
    """Reporting conditions from the candidate points of a test window.

    Parameters
    ----------
    poa : [W/m^2]; temp_air : [C]; wind_speed : [m/s] (candidate points, same index)
    settings : ``rc_min_poa_wm2`` and ``rc_percentile``

    Returns
    -------
    dict poa_wm2 (the ``rc_percentile`` percentile, linear interpolation, of the irradiance of
    the points at or above ``rc_min_poa_wm2``), temp_air_c and wind_speed_ms (means of the same
    points).

    References
    ----------
    ASTM E2939-13, Standard Practice for Determining Reporting Conditions and Expected Capacity
    for Photovoltaic Non-Concentrator Systems (percentile rule and the 400 W/m^2 floor from
    memory, not verified against the text).
    """
    sel = poa >= settings.rc_min_poa_wm2
    if not sel.any():
        raise DataError(f"no interval with plane-of-array irradiance at or above "
                        f"{settings.rc_min_poa_wm2:.0f} W/m2 to choose reporting conditions "
                        "from; give --rc-poa, --rc-temp and --rc-wind or choose another window")
    return {
        "poa_wm2": float(np.percentile(poa[sel], settings.rc_percentile)),
        "temp_air_c": float(temp_air[sel].mean()),
        "wind_speed_ms": float(wind_speed[sel].mean()),
    }


def plant_series(aligned: pd.DataFrame, site: Site, settings: CapacitySettings) -> pd.DataFrame:
    """Plant power and weather per interval, with the per-interval filter columns.

    Returns a frame indexed by ts: measured_kw, expected_kw, poa_wm2 (P0-weighted), temp_air_c,
    wind_speed_ms, interval_s, and booleans valid, running, unclipped.
    """
    inv = {i.id: i for i in site.inverters}
    a = aligned[aligned["inverter_id"].isin(list(inv))].copy()
    a["p0_w"] = a["inverter_id"].map({k: v.dc_kwp * 1000.0 for k, v in inv.items()})
    a["ac_w"] = a["inverter_id"].map({k: v.ac_kw * 1000.0 for k, v in inv.items()})
    need = ["measured_ac_w", "expected_ac_w", "poa_wm2", "temp_air_c", "wind_speed_ms"]
    a["ok"] = a[need].notna().all(axis=1) & (a["flags"].fillna("") == "")
    a["run"] = a["measured_ac_w"] >= settings.running_fraction * a["ac_w"]
    limit = settings.clip_fraction * a["ac_w"]
    a["unclip"] = (a["measured_ac_w"] < limit) & (a["potential_ac_w"].fillna(np.inf) < limit)
    a["p0_poa"] = a["p0_w"] * a["poa_wm2"]
    g = a.groupby("ts")
    out = pd.DataFrame({
        "measured_kw": g["measured_ac_w"].sum() / 1000.0,
        "expected_kw": g["expected_ac_w"].sum() / 1000.0,
        "potential_kw": g["potential_ac_w"].sum() / 1000.0,
        "poa_wm2": g["p0_poa"].sum() / g["p0_w"].sum(),
        "temp_air_c": g["temp_air_c"].mean(),
        "wind_speed_ms": g["wind_speed_ms"].mean(),
        "interval_s": g["interval_s"].max(),
        "valid": g["ok"].all() & (g.size() == len(inv)),
        "running": g["run"].all(),
        "unclipped": g["unclip"].all(),
    })
    if site.export_limit_kw is not None:
        plant_limit = settings.clip_fraction * site.export_limit_kw
        out["unclipped"] &= (out["measured_kw"] < plant_limit) & (out["potential_kw"]
                                                                  < plant_limit)
    return out


def stable_sky(poa: pd.Series, interval_s: float, settings: CapacitySettings) -> pd.Series:
    """True where the irradiance's coefficient of variation over a centred window is small.

    Parameters
    ----------
    poa : irradiance on a regular time grid (gaps as NaN) [W/m^2]
    interval_s : grid step [s]
    settings : ``stable_window_s`` (at least three intervals are used) and ``stable_cv_max``

    Notes
    -----
    Common practice, no source: a capacity test wants clear, steady sky; a window is steady when
    std/mean of its irradiance is at most ``stable_cv_max``. Any gap in the window makes it
    unsteady.
    """
    n = max(3, int(round(settings.stable_window_s / interval_s)))
    n += 1 - n % 2  # odd, so the window is centred
    roll = poa.rolling(n, center=True, min_periods=n)
    cv = roll.std() / roll.mean()
    return (cv <= settings.stable_cv_max).fillna(False)


def run_test(
    aligned: pd.DataFrame,
    site: Site,
    guaranteed_ratio: float,
    rc: Mapping[str, float] | None = None,
    curtailment: pd.DataFrame | None = None,
    settings: CapacitySettings | None = None,
) -> dict[str, Any]:
    """The capacity test over the aligned rows of a window; see the module docstring.

    ``curtailment`` has columns start_ts, end_ts (UTC; any scope); ``rc`` overrides the
    reporting conditions (all three keys). Returns the result record (capacity.schema.json's
    ``result``, ``reporting_conditions``, ``filters``, ``regression``).
    """
    settings = settings or CapacitySettings()
    plant = plant_series(aligned, site, settings)
    if plant.empty:
        raise DataError("no aligned rows in the test window")
    step = float(plant["interval_s"].mode().iloc[0])
    grid = pd.date_range(plant.index.min(), plant.index.max(), freq=pd.Timedelta(seconds=step))
    plant = plant.reindex(grid)
    for col in ("valid", "running", "unclipped"):
        plant[col] = plant[col].astype("boolean").fillna(False).astype(bool)
    curtailed = pd.Series(False, index=plant.index)
    for _, w in (curtailment if curtailment is not None else pd.DataFrame()).iterrows():
        curtailed |= (plant.index >= w["start_ts"]) & (plant.index < w["end_ts"])
    steady = stable_sky(plant["poa_wm2"].where(plant["valid"]), step, settings)
    steps = [
        ("intervals in the window", pd.Series(True, index=plant.index)),
        ("valid and unflagged", plant["valid"]),
        ("daytime (irradiance above 0)", plant["poa_wm2"] > 0),
        ("all inverters running", plant["running"]),
        ("no clipping", plant["unclipped"]),
        ("no curtailment", ~curtailed),
        ("stable sky", steady),
    ]
    mask = pd.Series(True, index=plant.index)
    filters = []
    for rule, keep in steps:
        mask &= keep
        filters.append({"rule": rule, "points": int(mask.sum())})
    cand = plant[mask]
    if rc is None:
        rc_used = reporting_conditions(cand["poa_wm2"], cand["temp_air_c"],
                                       cand["wind_speed_ms"], settings)
        rc_source = (f"from the window: irradiance P{settings.rc_percentile:.0f} of points "
                     f">= {settings.rc_min_poa_wm2:.0f} W/m2, temperature and wind their means "
                     "(ASTM E2939)")  # the rule as applied is from memory
    else:
        rc_used, rc_source = {k: float(rc[k]) for k in
                              ("poa_wm2", "temp_air_c", "wind_speed_ms")}, "given"
    band = settings.band_pct / 100.0
    inband = (cand["poa_wm2"] >= (1 - band) * rc_used["poa_wm2"]) & (
        cand["poa_wm2"] <= (1 + band) * rc_used["poa_wm2"])
    pts = cand[inband]
    filters.append({"rule": f"irradiance within +/-{settings.band_pct:g} % of "
                            f"{rc_used['poa_wm2']:.0f} W/m2", "points": len(pts)})
    if len(pts) < settings.min_points:
        counts = ", ".join(f"{f['points']} {f['rule']}" for f in filters)
        raise DataError(f"capacity test: only {len(pts)} points left after the filters (need "
                        f"{settings.min_points}): {counts}; widen the window or lower "
                        "--min-points")
    fits = {}
    caps = {}
    for name, col in (("measured", "measured_kw"), ("expected", "expected_kw")):
        fit = fit_e2848(pts["poa_wm2"], pts["temp_air_c"], pts["wind_speed_ms"], pts[col])
        fits[name] = _fit_record(fit)
        caps[name] = capacity_at(fit, rc_used, settings.confidence)
    m, e = caps["measured"], caps["expected"]
    ratio = m["value"] / e["value"]
    rel = np.hypot((m["value"] - m["low"]) / m["value"], (e["value"] - e["low"]) / e["value"])
    reh = np.hypot((m["high"] - m["value"]) / m["value"], (e["high"] - e["value"]) / e["value"])
    u_pct, u_source = metrics.sensor_uncertainty(site)
    # the sensor's 95 % expanded uncertainty brought to the test's confidence (normal)
    u = u_pct / 100 * NormalDist().inv_cdf((1 + settings.confidence) / 2) / Z95
    lo, hi = ratio * (1 - np.hypot(rel, u)), ratio * (1 + np.hypot(reh, u))
    passed = ratio >= guaranteed_ratio
    return {
        "reporting_conditions": {**rc_used, "source": rc_source},
        "filters": filters,
        "points": len(pts),
        "first_point": pts.index.min(),
        "last_point": pts.index.max(),
        "regression": fits,
        "result": {
            "measured_capacity_kw": m["value"],
            "measured_capacity_kw_ci_low": m["low"],
            "measured_capacity_kw_ci_high": m["high"],
            "expected_capacity_kw": e["value"],
            "expected_capacity_kw_ci_low": e["low"],
            "expected_capacity_kw_ci_high": e["high"],
            "ratio": ratio,
            "ratio_ci_low": lo,
            "ratio_ci_high": hi,
            "ratio_regression_ci_low": ratio * (1 - rel),
            "ratio_regression_ci_high": ratio * (1 + reh),
            "irradiance_uncertainty_pct": u_pct,
            "irradiance_uncertainty_source": u_source,
            "guaranteed_ratio": guaranteed_ratio,
            "passed": bool(passed),
            "significant": bool(hi < guaranteed_ratio if not passed else lo >= guaranteed_ratio),
        },
        "settings": asdict(settings),
    }


def _fit_record(fit: Any) -> dict[str, Any]:
    return {
        "coefficients": dict(zip(TERMS, map(float, fit.params), strict=True)),
        "std_errors": dict(zip(TERMS, map(float, fit.bse), strict=True)),
        "r_squared": float(fit.rsquared),
        "residual_std_kw": float(np.sqrt(fit.scale)),
        "points": int(fit.nobs),
    }


def run(
    con: duckdb.DuckDBPyConnection,
    site: Site,
    start: pd.Timestamp,
    end: pd.Timestamp,
    guaranteed_ratio: float,
    rc: Mapping[str, float] | None = None,
    settings: CapacitySettings | None = None,
) -> dict[str, Any]:
    """The capacity document for ``[start, end)`` (see ``perfcheck/schemas/capacity.schema.json``).

    Curtailment windows come from the stored analysis's events over the same window, and the
    measured power from its ledger (clock faults shifted back).
    """
    stored = analysis.update(con, site)
    aligned = analysis.series(con, site, start, end, stored)
    events = analysis.events(con, site, stored, start, end)
    curtailed = metrics.event_windows(
        [e for e in events if e["kind"] == "curtailment"], metrics.Settings())
    res = run_test(aligned, site, guaranteed_ratio, rc, curtailed, settings)
    r = res["result"]
    verdict = (
        f"Measured capacity {r['measured_capacity_kw']:.1f} kW "
        f"({r['measured_capacity_kw_ci_low']:.1f} to {r['measured_capacity_kw_ci_high']:.1f}) "
        f"against expected {r['expected_capacity_kw']:.1f} kW at "
        f"{res['reporting_conditions']['poa_wm2']:.0f} W/m2, "
        f"{res['reporting_conditions']['temp_air_c']:.1f} C, "
        f"{res['reporting_conditions']['wind_speed_ms']:.1f} m/s: ratio {r['ratio']:.3f} "
        f"({r['ratio_ci_low']:.3f} to {r['ratio_ci_high']:.3f}), "
        f"{'PASS' if r['passed'] else 'FAIL'} against the guaranteed {guaranteed_ratio:.3f}"
        + ("" if r["significant"] else " (the interval straddles the guarantee)")
    )
    doc = {
        "site": metrics.site_record(site),
        "test": {"start": metrics.local_iso(start, site), "end": metrics.local_iso(end, site),
                 "first_point": metrics.local_iso(res.pop("first_point"), site),
                 "last_point": metrics.local_iso(res.pop("last_point"), site),
                 "method": "ASTM E2848-13 regression at ASTM E2939-13 reporting conditions",
                 "interval_method": "ratio interval: the 95 % intervals of the two mean "
                                    "predictions at RC and the irradiance sensor's calibration "
                                    "uncertainty, relative, in quadrature (GUM)"},
        **res,
        "verdict": verdict,
        "cautions": CAUTIONS,
        "run": metrics.run_record(),
    }
    return metrics.json_ready(doc)


CAUTIONS = [
    "PV arrays are energised whenever light falls on them and DC arcs do not self-extinguish; "
    "any site work only by qualified persons under local codes and the plant's safety rules.",
    "The result is an indication from logged data, to be confirmed against the contract's test "
    "procedure; it is evidence, not legal advice.",
]
