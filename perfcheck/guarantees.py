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

``evaluate(site, check_result, contract_year)`` returns the findings (the ``guarantees`` list of
the ``perfcheck check`` JSON). Each finding puts the measured value and its interval beside the
promise and tests the shortfall one-sidedly.

A performance or availability guarantee is a promise per contract year, so it is tested per
contract year, on the whole contract year, and only on a complete one: every contract year
that overlaps the period gets its own finding with its own promised value (never a blend of
two years' values), measured over the whole contract year (``contract_year(start, end)``
gives its period metrics; a month's PR is never set against an annual promise). A contract
year that the data do not cover from its first to its last day is "not yet testable", with
the share of the year the data cover (``covered_share``).

The module warranty is tested on the degradation rate measured over the whole history
(year-on-year pairs of days one year apart): its promise is the warranted loss between the
same ages, the mean of curve(t) - curve(t + 1) [% of nameplate per year] over the ages t of
the pairs' earlier days, so it does not depend on the period viewed.

``finding`` is one of

- ``met``: compliance is shown: the measured value meets the promise and a one-sided test of
  "true value < promised" rejects it at the stated confidence (the interval sits above the promise);
- ``met_not_shown``: the measured value meets the promise, but the promise lies within its
  uncertainty, so compliance is not shown either (a verdict either way could be wrong);
- ``met_untested``: the measured value meets the promise; it carries no interval to test it;
- ``not_shown``: it is below the promise but within its uncertainty (not a breach);
- ``shortfall_shown``: the shortfall is significant at the stated confidence;
- ``shortfall_untested``: below the promise, but the metric carries no interval to test it;
- ``not_enough_data``: the metric has no value for the period;
- ``not_yet_testable``: the contract year is not complete in the data.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass
from statistics import NormalDist
from typing import Any

import numpy as np
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
    """The finding of a one-sided test, honest both ways.

    ``p`` is Phi(z) of :func:`one_sided`, the p-value of a shortfall; ``1 - p`` is the p-value
    of "the promise is kept", so compliance is shown only when ``1 - p < 1 - confidence``. A
    point value on the right side of the promise with an interval across it is not a "met"
    (a warranty verdict the data do not support is the worst output a claim can carry).
    """
    if value is None:
        return "not_enough_data"
    if value >= promised:
        if p is None:
            return "met_untested"
        return "met" if 1 - p < 1 - confidence else "met_not_shown"
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


def contract_years(start: dt.date, period_start: pd.Timestamp, period_end: pd.Timestamp,
                   tz: str) -> list[tuple[int, pd.Timestamp, pd.Timestamp]]:
    """Contract years (1-based number, start, end) that overlap ``[period_start, period_end)``."""
    s = pd.Timestamp(start, tz=tz)
    out = []
    k = 1
    while s + pd.DateOffset(years=k - 1) < period_end:
        a, b = s + pd.DateOffset(years=k - 1), s + pd.DateOffset(years=k)
        if b > period_start:
            out.append((k, a, b))
        k += 1
    return out


def covered_share(start: pd.Timestamp, end: pd.Timestamp, first: pd.Timestamp,
                  last: pd.Timestamp) -> float:
    """Share of ``[start, end)`` that the data history ``[first, last)`` covers [-]."""
    inside = (min(end, last) - max(start, first)).total_seconds()
    return max(0.0, inside) / (end - start).total_seconds()


def warranted_yoy_loss(age_first: float, age_last: float, first_year_loss_pct: float,
                       yearly_loss_pct: float, n: int = 401) -> float:
    """Mean warranted loss between ages t and t + 1 [% of nameplate per year] for t from
    ``age_first`` to ``age_last`` (the ages of the earlier days of year-on-year pairs).

    curve(t) - curve(t + 1) with the curve of :func:`warranted_power_pct`, averaged over an even
    grid of ``n`` ages (trapezoid rule, exact where the function is linear; one age gives its
    value). Past year 1 it is the yearly loss; inside year 1 it runs from the first-year
    loss down to the yearly loss.
    """
    t = np.linspace(age_first, max(age_first, age_last), n)
    d = np.array([warranted_power_pct(a, first_year_loss_pct, yearly_loss_pct)
                  - warranted_power_pct(a + 1, first_year_loss_pct, yearly_loss_pct) for a in t])
    return float((d.sum() - (d[0] + d[-1]) / 2) / (n - 1))


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


def _history(result: dict) -> tuple[pd.Timestamp, pd.Timestamp]:
    """The span of the data history: the stored analysis's, else the period's."""
    h = result.get("analysis") or {}
    if h.get("history_start") and h.get("history_end"):
        return pd.Timestamp(h["history_start"]), pd.Timestamp(h["history_end"])
    return tuple(pd.Timestamp(result["period"][k]) for k in ("start", "end"))  # type: ignore


ContractYear = Callable[[pd.Timestamp, pd.Timestamp], dict[str, Any]]


def _performance(p: Performance, g: Guarantees, result: dict, site: Site,
                 contract_year: ContractYear | None) -> list[dict]:
    ps, pe = (pd.Timestamp(result["period"][k]) for k in ("start", "end"))
    first, last = _history(result)
    level = result.get("settings", {}).get("confidence", 0.95)
    out = []
    for k, a, b in contract_years(p.start, ps, pe, site.timezone):
        share = covered_share(a, b, first, last)
        period: dict[str, Any] = {}
        if share >= 1.0:
            same = a == ps and b == pe
            if same or contract_year is not None:
                period = result["metrics"]["period"] if same else contract_year(a, b)
        year = {"contract_year": k, "contract_years": [k], "covered_share": share,
                "contract_year_start": a.isoformat(), "contract_year_end": b.isoformat()}
        promised = p.yearly[min(k, len(p.yearly)) - 1]
        name = f"performance guarantee ({METRIC_WORDS[p.metric]}), contract year {k}"
        f = _finding(name, "performance", promised, period.get(p.metric),
                     period.get(f"{p.metric}_ci_low"), period.get(f"{p.metric}_ci_high"),
                     level, g)
        f.update(year, metric=p.metric)
        e = period.get("measured_kwh") or 0.0
        f["energy_short_kwh"] = ratio_energy_short(e, promised, f["measured"])
        f["energy_short_kwh_low"] = ratio_energy_short(e, promised, f["measured_ci_high"])
        f["energy_short_kwh_high"] = ratio_energy_short(e, promised, f["measured_ci_low"])
        out.append(_money(_untestable(f, period), g))
        if p.availability is None:
            continue
        m = p.availability_metric
        a_f = _finding(f"guaranteed availability, contract year {k}", "availability",
                       p.availability, period.get(m), period.get(f"{m}_ci_low"),
                       period.get(f"{m}_ci_high"), level, g)
        a_f.update(year, metric=m)
        exp = period.get("expected_kwh") or 0.0
        for key, v in (("energy_short_kwh", a_f["measured"]), ("energy_short_kwh_low",
                       a_f["measured_ci_high"]), ("energy_short_kwh_high", a_f["measured_ci_low"])):
            a_f[key] = None if v is None else max(0.0, exp * (p.availability - v))
        out.append(_money(_untestable(a_f, period), g))
    return out


def _untestable(f: dict, period: dict) -> dict:
    """Mark a finding of an incomplete contract year (no period metrics were looked up)."""
    if not period:
        f["finding"] = "not_yet_testable"
    return f


def _warranty(w: ModuleWarranty, g: Guarantees, result: dict, site: Site) -> dict:
    deg = result.get("degradation") or {}
    ps, pe = (pd.Timestamp(result["period"][k]) for k in ("start", "end"))
    s = pd.Timestamp(w.start, tz=site.timezone)

    def age(t: pd.Timestamp) -> float:
        return (t - s).total_seconds() / 86400 / DAYS_PER_YEAR

    a0, a1 = age(ps), age(pe)
    first, last = _history(result)
    # the pairs' earlier days lie in the history's first (span - 1 year)
    warranted_rate = warranted_yoy_loss(age(first), age(last) - 1, w.first_year_loss_pct,
                                        w.yearly_loss_pct)  # [%/yr], loss positive
    curve = [warranted_power_pct(a, w.first_year_loss_pct, w.yearly_loss_pct) for a in (a0, a1)]
    rate, lo, hi = deg.get("rate_pct_per_year"), deg.get("ci_low"), deg.get("ci_high")
    level = deg.get("ci_level", result.get("settings", {}).get("confidence", 0.95))
    # Tested on the rate with gains positive: measured rate against minus the warranted loss.
    f = _finding("module power warranty (degradation rate)", "module_warranty", -warranted_rate,
                 rate, lo, hi, level, g)
    f["metric"] = "degradation_rate_pct_per_year"
    f["warranted_power_pct_end"] = curve[1]
    f["history_start"], f["history_end"] = first.isoformat(), last.isoformat()
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


def evaluate(site: Site, check_result: dict, contract_year: ContractYear | None = None
             ) -> list[dict]:
    """The findings of the promises declared in ``[guarantees]``; [] when none is declared.

    ``contract_year(start, end)`` gives the period metrics of a whole contract year (as in
    ``check_result["metrics"]["period"]``); without it only a contract year that is the
    period itself can be tested.
    """
    g = settings(site)
    out = []
    if g.performance is not None:
        out += _performance(g.performance, g, check_result, site, contract_year)
    if g.module_warranty is not None:
        out.append(_warranty(g.module_warranty, g, check_result, site))
    return out


LABELS = {  # the finding in a few words, for tables
    "met": "met",
    "met_not_shown": "met, within uncertainty",
    "met_untested": "met, untested",
    "not_shown": "short, within uncertainty",
    "shortfall_shown": "shortfall shown",
    "shortfall_untested": "short, untested",
    "not_enough_data": "not enough data",
    "not_yet_testable": "not yet testable",
}

WORDS = {
    "met": "the promise is met, beyond its uncertainty",
    "met_not_shown": "the measured value meets the promise, but the promise lies within its "
                     "uncertainty, so compliance is not shown",
    "met_untested": "the measured value meets the promise; it carries no interval, so "
                    "compliance is not tested",
    "not_shown": "the measured value is below the promise but within its uncertainty, so a "
                 "shortfall is not shown",
    "shortfall_shown": "the shortfall is statistically significant",
    "shortfall_untested": "the measured value is below the promise; it carries no interval, so "
                          "the shortfall is not tested",
    "not_enough_data": "there is not enough data to measure it",
    "not_yet_testable": "the contract year is not complete in the data, so the promise cannot "
                        "be tested yet",
}


def statement(f: dict) -> str:
    """One plain sentence for a finding (the warranty in terms of loss rate, positive)."""
    sign = -1.0 if f["kind"] == "module_warranty" else 1.0

    def num(v: float | None) -> str:
        return "n/a" if v is None else f"{sign * v:.4g}"

    if f["kind"] == "module_warranty":
        text = (f"Module power warranty: warranted loss at most {num(f['promised'])} %/yr "
                "between the ages the year-on-year pairs compare, measured loss rate "
                f"{num(f['measured'])} %/yr")
        lo, hi = f.get("measured_ci_high"), f.get("measured_ci_low")
    else:
        name = f["name"]
        text = (f"{name[:1].upper()}{name[1:]}: promised {num(f['promised'])}, measured "
                f"{num(f['measured'])}")
        lo, hi = f.get("measured_ci_low"), f.get("measured_ci_high")
    if lo is not None and hi is not None:
        text += f" ({f['interval_level']:.0%} interval {num(lo)} to {num(hi)})"
    text += f"; {WORDS[f['finding']]}"
    if f["finding"] == "not_yet_testable":
        text += f" ({f['covered_share']:.0%} of the contract year covered)"
    if f.get("p_value") is not None and f["finding"] not in ("met", "met_not_shown"):
        text += f" (one-sided p = {f['p_value']:.3g}, level {1 - f['confidence']:.3g})"
    if f["finding"] in ("shortfall_shown", "not_shown", "shortfall_untested") and \
            f.get("energy_short_kwh") is not None:
        text += f". Energy short {f['energy_short_kwh']:,.0f} kWh"
        if f.get("money_short") is not None:
            text += f", {f['money_short']:,.2f} {f['currency']}".rstrip()
    return text + ". This is evidence from data, not legal advice."
