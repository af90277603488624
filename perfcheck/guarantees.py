"""What was promised against what was measured: performance guarantee, availability, warranty.

The site file may declare (all optional)::

    [guarantees]
    confidence = 0.95            # level of the one-sided tests
    price_per_kwh = 0.10         # for the money short
    currency = "EUR"

    [guarantees.performance]     # O&M or EPC performance guarantee
    metric = "pr_temp_corrected" # or "epi", "pr", "pr_weather_corrected"
    yearly = [0.80, 0.795]       # guaranteed value per contract year (the last one repeats)
    availability = 0.98          # guaranteed availability (fraction)
    availability_basis = "time"  # or "energy" (which availability the contract means)
    start = 2024-04-01           # first day of contract year 1 (default: site.commissioned)

    [guarantees.module_warranty] # the warranted power curve
    first_year_loss_pct = 2.0    # at most this lost by the end of year 1
    yearly_loss_pct = 0.55       # at most this lost per year thereafter
    start = 2024-04-01           # default: site.commissioned

``evaluate(site, check_result)`` returns one finding per promise (the ``guarantees`` list of the
``perfcheck check`` JSON). Each finding puts the measured value and its interval beside the
promise and tests the shortfall one-sidedly; ``finding`` is one of

- ``met``: the measured value meets or beats the promise;
- ``not_shown``: it is below the promise but within its uncertainty (not a breach);
- ``shortfall_shown``: the shortfall is significant at the stated confidence;
- ``shortfall_untested``: below the promise, but the metric carries no interval to test it;
- ``not_enough_data``: the metric has no value for the period.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from statistics import NormalDist
from typing import Any

import pandas as pd

from perfcheck.site import Site, Table

METRICS = ("pr_temp_corrected", "epi", "pr", "pr_weather_corrected")
METRIC_WORDS = {"pr_temp_corrected": "temperature-corrected PR", "epi": "EPI", "pr": "PR",
                "pr_weather_corrected": "weather-corrected PR"}
DAYS_PER_YEAR = 365.25
_N = NormalDist()


@dataclass(frozen=True)
class Performance:
    metric: str
    yearly: tuple[float, ...]
    availability: float | None
    availability_metric: str  # "availability" (time-based) or "availability_energy"
    start: dt.date


@dataclass(frozen=True)
class ModuleWarranty:
    first_year_loss_pct: float
    yearly_loss_pct: float
    start: dt.date


@dataclass(frozen=True)
class Guarantees:
    confidence: float
    price_per_kwh: float | None
    currency: str
    performance: Performance | None
    module_warranty: ModuleWarranty | None


def settings(site: Site) -> Guarantees:
    """Read and validate ``[guarantees]`` from the site file (key-path errors)."""
    t = Table(site.raw.get("guarantees", {}), "guarantees", site.path)
    perf = warranty = None
    if "performance" in t.data:
        p = t.table("performance")
        metric = p.get("metric", str, "pr_temp_corrected", METRICS)
        yearly = p.get("yearly", list, [])
        if not yearly or not all(isinstance(v, (int, float)) and 0 < v <= 2 for v in yearly):
            raise p._err("yearly", "expected one guaranteed value per contract year, e.g. "
                         "[0.80, 0.795]")
        avail = p.number("availability", None, lo=0, hi=1)
        basis = p.get("availability_basis", str, "time", ("time", "energy"))
        perf = Performance(metric, tuple(float(v) for v in yearly), avail,
                           "availability" if basis == "time" else "availability_energy",
                           p.get("start", dt.date, site.commissioned))
        p.done()
    if "module_warranty" in t.data:
        w = t.table("module_warranty")
        warranty = ModuleWarranty(w.number("first_year_loss_pct", lo=0, hi=50),
                                  w.number("yearly_loss_pct", lo=0, hi=10),
                                  w.get("start", dt.date, site.commissioned))
        w.done()
    g = Guarantees(
        confidence=t.number("confidence", 0.95, lo=0.5, hi=0.9999),
        price_per_kwh=t.number("price_per_kwh", None, lo=0),
        currency=t.get("currency", str, ""),
        performance=perf,
        module_warranty=warranty,
    )
    t.done()
    return g


# --------------------------------------------------------------------------------------------
# arithmetic (pure)


def standard_error(low: float, high: float, level: float) -> float:
    """Standard error from a two-sided interval at ``level``, normal approximation.

    se = (high - low) / (2 z), z the (1 + level)/2 quantile of the standard normal.
    """
    return (high - low) / (2 * _N.inv_cdf((1 + level) / 2))


def one_sided(value: float, promised: float, se: float | None) -> tuple[float | None, float | None]:
    """z statistic and p-value of H0 "true value >= promised" against "true value < promised".

    z = (value - promised) / se, p = Phi(z); a small p shows a shortfall.
    """
    if se is None or not se > 0:
        return None, None
    z = (value - promised) / se
    return z, _N.cdf(z)


def classify(value: float | None, promised: float, p: float | None, confidence: float) -> str:
    if value is None:
        return "not_enough_data"
    if value >= promised:
        return "met"
    if p is None:
        return "shortfall_untested"
    return "shortfall_shown" if p < 1 - confidence else "not_shown"


def ratio_energy_short(measured_kwh: float, promised: float, value: float | None) -> float | None:
    """Energy short when a ratio metric (PR, EPI) fell from ``promised`` to ``value`` [kWh].

    Under the same irradiance the energy scales with the ratio, so the energy had the promise
    been kept is E * promised / value, and the shortfall E * (promised / value - 1), never < 0.
    """
    if value is None or not value > 0:
        return None
    return max(0.0, measured_kwh * (promised / value - 1))


def contract_year_weights(start: dt.date, period_start: pd.Timestamp, period_end: pd.Timestamp,
                          tz: str) -> dict[int, float]:
    """Days of the period in each contract year (1-based) as a share of the period's days."""
    s = pd.Timestamp(start, tz=tz)
    days: dict[int, float] = {}
    k = 1
    while s + pd.DateOffset(years=k - 1) < period_end:
        a = max(s + pd.DateOffset(years=k - 1), period_start)
        b = min(s + pd.DateOffset(years=k), period_end)
        if b > a:
            days[k] = (b - a).total_seconds() / 86400
        k += 1
    total = sum(days.values())
    return {k: v / total for k, v in days.items()} if total else {}


def warranted_power_pct(age_years: float, first_year_loss_pct: float,
                        yearly_loss_pct: float) -> float:
    """The warranted power curve [% of nameplate] at ``age_years`` since the warranty start.

    Linear from 100 % to 100 - first-year loss over year 1, then down by the yearly loss.
    """
    if age_years <= 1:
        return 100.0 - first_year_loss_pct * max(age_years, 0.0)
    return 100.0 - first_year_loss_pct - yearly_loss_pct * (age_years - 1)


# --------------------------------------------------------------------------------------------
# findings


def _finding(name: str, kind: str, promised: float, value: float | None, low: float | None,
             high: float | None, level: float, g: Guarantees) -> dict[str, Any]:
    se = standard_error(low, high, level) if None not in (value, low, high) else None
    z, p = one_sided(value, promised, se) if value is not None else (None, None)
    return {
        "name": name, "kind": kind, "promised": promised, "measured": value,
        "measured_ci_low": low, "measured_ci_high": high, "interval_level": level,
        "confidence": g.confidence, "z": z, "p_value": p,
        "test": "one-sided z test of measured < promised, standard error from the interval",
        "finding": classify(value, promised, p, g.confidence),
    }


def _money(f: dict, g: Guarantees) -> dict:
    for key in ("energy_short_kwh", "energy_short_kwh_low", "energy_short_kwh_high"):
        v = f.get(key)
        money_key = key.replace("energy_short_kwh", "money_short")
        f[money_key] = None if v is None or g.price_per_kwh is None else v * g.price_per_kwh
    f["currency"] = g.currency
    f["price_per_kwh"] = g.price_per_kwh
    f["statement"] = statement(f)
    return f


def _performance(p: Performance, g: Guarantees, result: dict, site: Site) -> list[dict]:
    period = result["metrics"]["period"]
    ps, pe = (pd.Timestamp(result["period"][k]) for k in ("start", "end"))
    weights = contract_year_weights(p.start, ps, pe, site.timezone)
    promised = sum(w * p.yearly[min(k, len(p.yearly)) - 1] for k, w in weights.items())
    level = result.get("settings", {}).get("confidence", 0.95)
    out = []
    f = _finding(f"performance guarantee ({METRIC_WORDS[p.metric]})", "performance", promised,
                 period.get(p.metric), period.get(f"{p.metric}_ci_low"),
                 period.get(f"{p.metric}_ci_high"), level, g)
    f["contract_years"] = sorted(weights)
    f["metric"] = p.metric
    e = period.get("measured_kwh") or 0.0
    f["energy_short_kwh"] = ratio_energy_short(e, promised, f["measured"])
    f["energy_short_kwh_low"] = ratio_energy_short(e, promised, f["measured_ci_high"])
    f["energy_short_kwh_high"] = ratio_energy_short(e, promised, f["measured_ci_low"])
    out.append(_money(f, g))
    if p.availability is not None:
        a = _finding("guaranteed availability", "availability", p.availability,
                     period.get(p.availability_metric),
                     period.get(f"{p.availability_metric}_ci_low"),
                     period.get(f"{p.availability_metric}_ci_high"), level, g)
        a["metric"] = p.availability_metric
        a["contract_years"] = sorted(weights)
        exp = period.get("expected_kwh") or 0.0
        for key, v in (("energy_short_kwh", a["measured"]), ("energy_short_kwh_low",
                       a["measured_ci_high"]), ("energy_short_kwh_high", a["measured_ci_low"])):
            a[key] = None if v is None else max(0.0, exp * (p.availability - v))
        out.append(_money(a, g))
    return out


def _warranty(w: ModuleWarranty, g: Guarantees, result: dict, site: Site) -> dict:
    deg = result.get("degradation") or {}
    ps, pe = (pd.Timestamp(result["period"][k]) for k in ("start", "end"))
    s = pd.Timestamp(w.start, tz=site.timezone)
    a0, a1 = ((t - s).total_seconds() / 86400 / DAYS_PER_YEAR for t in (ps, pe))
    curve = [warranted_power_pct(a, w.first_year_loss_pct, w.yearly_loss_pct) for a in (a0, a1)]
    warranted_rate = (curve[0] - curve[1]) / (a1 - a0)  # [%/yr], loss positive
    rate, lo, hi = deg.get("rate_pct_per_year"), deg.get("ci_low"), deg.get("ci_high")
    level = deg.get("ci_level", result.get("settings", {}).get("confidence", 0.95))
    # Tested on the rate with gains positive: measured rate against minus the warranted loss.
    f = _finding("module power warranty (degradation rate)", "module_warranty", -warranted_rate,
                 rate, lo, hi, level, g)
    f["metric"] = "degradation_rate_pct_per_year"
    f["warranted_power_pct_end"] = curve[1]
    age_mid = (a0 + a1) / 2
    for key, r in (("energy_short_kwh", rate), ("energy_short_kwh_low", hi),
                   ("energy_short_kwh_high", lo)):
        f[key] = None
        if r is not None:
            measured_pct = 100.0 + r * age_mid  # the measured rate held since the start
            warranted_pct = warranted_power_pct(age_mid, w.first_year_loss_pct,
                                                w.yearly_loss_pct)
            e = result["metrics"]["period"].get("measured_kwh") or 0.0
            f[key] = ratio_energy_short(e, warranted_pct, measured_pct)
    if rate is None:
        f["note"] = deg.get("status", "not enough data")
    return _money(f, g)


def evaluate(site: Site, check_result: dict) -> list[dict]:
    """One finding per promise declared in ``[guarantees]``; [] when none is declared."""
    g = settings(site)
    out = []
    if g.performance is not None:
        out += _performance(g.performance, g, check_result, site)
    if g.module_warranty is not None:
        out.append(_warranty(g.module_warranty, g, check_result, site))
    return out


WORDS = {
    "met": "the promise is met",
    "not_shown": "the measured value is below the promise but within its uncertainty, so a "
                 "shortfall is not shown",
    "shortfall_shown": "the shortfall is statistically significant",
    "shortfall_untested": "the measured value is below the promise; it carries no interval, so "
                          "the shortfall is not tested",
    "not_enough_data": "there is not enough data to measure it",
}


def statement(f: dict) -> str:
    """One plain sentence for a finding (the warranty in terms of loss rate, positive)."""
    sign = -1.0 if f["kind"] == "module_warranty" else 1.0

    def num(v: float | None) -> str:
        return "n/a" if v is None else f"{sign * v:.4g}"

    if f["kind"] == "module_warranty":
        text = (f"Module power warranty: warranted loss at most {num(f['promised'])} %/yr over "
                f"the period, measured loss rate {num(f['measured'])} %/yr")
        lo, hi = f.get("measured_ci_high"), f.get("measured_ci_low")
    else:
        name = f["name"]
        text = (f"{name[:1].upper()}{name[1:]}: promised {num(f['promised'])}, measured "
                f"{num(f['measured'])}")
        lo, hi = f.get("measured_ci_low"), f.get("measured_ci_high")
    if lo is not None and hi is not None:
        text += f" ({f['interval_level']:.0%} interval {num(lo)} to {num(hi)})"
    text += f"; {WORDS[f['finding']]}"
    if f.get("p_value") is not None and f["finding"] != "met":
        text += f" (one-sided p = {f['p_value']:.3g}, level {1 - f['confidence']:.3g})"
    if f["finding"] in ("shortfall_shown", "not_shown", "shortfall_untested") and \
            f.get("energy_short_kwh") is not None:
        text += f". Energy short {f['energy_short_kwh']:,.0f} kWh"
        if f.get("money_short") is not None:
            text += f", {f['money_short']:,.2f} {f['currency']}".rstrip()
    return text + ". This is evidence from data, not legal advice."
