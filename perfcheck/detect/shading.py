"""Shading growth: beam losses in a region of the sky that grow over the months (a tree, a new
building).

Per inverter, clear-sky intervals (GHI within ±20 % of the clear-sky GHI; without a GHI
channel the plane irradiance within ±20 % of its clear-sky value) are binned by sun azimuth
(``az_step`` degrees) and elevation (``el_step`` degrees). The deficit of an interval is
1 - (measured/expected) / (the day's median of measured/expected), so what the whole day
shares (soiling, degradation, a lost string, model bias of the day) cancels.

Detection. Per bin, growth is tested on the daily mean deficits of the steady clear
intervals (their neighbours clear too: an interval at a cloud's bright edge passes the band
around the clear sky, but its deficit is the cloud's): with more than a year of
data, year-on-year pairs (the same sun path a year later; the model's own shape errors there
repeat and cancel) with a one-sided t test; with less, the trend over time given the day's
mean sun position in the bin (statsmodels OLS; standard errors clustered by month where the
bin's days span four months or more, HC3 otherwise): the sun crosses a bin elsewhere in
other seasons, and the model's error at low sun or at a grazing angle changes across a bin,
which a trend alone takes as growth. A bin that lost light on average over the record (mean
deficit at least half of ``min_deficit``; a screen independent of the growth test under its
null hypothesis, :func:`_screened`), whose one-sided p-value is below ``alpha`` divided by the
number of bins so screened in (Bonferroni) and whose growth is at least
``min_deficit`` per year is shaded by a growing obstruction, unless a sibling inverter of the
plant shows as much growth in the same bin (one-sided z test of the difference of the two
growths, level ``alpha``; without a sibling, or where the sibling has no test of the bin, the
bin stands): the model's error at low sun and a change of the sky through the seasons (the
irradiance sensor's or the weather's) reach every inverter, an obstruction of a few rows
one; the price is a bin of a single obstruction that shades the whole plant, which this
step cannot tell from the sky. Its neighbouring bins join at the plain level ``alpha`` (an
obstruction is one connected piece).

Region. A bin is too coarse for the energy: the obstruction's top crosses it over months.
Each clear interval is labelled shaded when its deficit exceeds the clear-sky noise at its
sun elevation (median and scaled MAD per elevation band, from the sky outside the candidate
columns, in the sky cells seen on enough intervals that the obstruction has not reached:
raised beyond the band's spread of cells and rising with the days, Kendall's tau at
``alpha``) by the one-sided normal quantile of ``alpha``. Per azimuth column, the top of the
obstruction on each day is the never-falling step that disagrees with the fewest labels
(dynamic programming); a column counts when, cross-fitted (the top fitted on even days
judged on odd days' intervals under it, and back), its shaded labels beat the column's own
label rate (binomial, ``alpha``). The columns of the shaded bins start the region, which
grows to the next column while each counts. The region is every interval (clear or not)
under its column's top that day.

Energy. Each interval of the region loses its expected power at the day's level (median
ratio of the intervals outside the region) times its deficit less its bin's unshaded
deficit (the model's shape error there, from the bin's clear intervals outside the region).
The 95 % band: the model's relative daily error; the long-run (autocorrelation-aware) noise
of the same estimate on the unshaded intervals of the region's sky bins; the standard error
of the unshaded deficits subtracted (each bin's, from its days, times the region's expected
energy in it: the same on every day); and upwards the loss under the highest top that fits
the labels as well as the lowest (the data cannot place the boundary closer).

The event (one per inverter) gives the azimuth range, the top elevation at the end, the first
day of the region (the event lasts to the end of the data: the obstruction is still there),
the energy and a proposed horizon profile. It starts on the first day its loss is material:
the first day whose estimated loss exceeds ``material_share`` (1 %, common practice) of the
inverter's expected energy of the day and is significant against the day's noise (one-sided,
``alpha``: the estimate's daily relative error on the unshaded intervals of the region's
sky bins, scaled MAD, times the region's expected energy that day). Where no day's loss stands
out of its noise on its own (a small loss, or one that reaches the sun's path only late), the
first day whose loss under a clear sky would exceed that share: the region's share of the
day's clear-sky plane irradiance times the region's mean relative loss on its clear
intervals; the first day of the region when neither does.

``min_deficit`` 5 % of the interval's power, common practice; ``alpha`` 0.01.

References
----------
Regression over time: ordinary least squares with heteroscedasticity-consistent errors
(MacKinnon & White 1985, J. Econometrics 29:305, HC3); clustered standard errors with t on
clusters - 1 degrees of freedom (Cameron & Miller 2015, J. Human Resources 50(2):317) (both
from memory). The binning by sun position follows the usual shading-loss diagrams (common
practice).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perfcheck.detect.common import (
    MODEL_FLOOR,
    Event,
    Footprint,
    Wide,
    coarsen,
    energy_band,
    long_run_sigma,
    scope_of,
)
from perfcheck.lazy import lazy_module

# the two modules called, not statsmodels.api (which loads its plots, time series and formulas)
linear_model = lazy_module("statsmodels.regression.linear_model")
tools = lazy_module("statsmodels.tools.tools")
special = lazy_module("scipy.special")
stats = lazy_module("scipy.stats")

METHOD = ("deficit against the day's median ratio binned by sun azimuth and elevation, growth "
          "per bin (year-on-year pairs, or OLS trend given the sun's place in the bin), "
          "Bonferroni over the bins that lost light on average; per azimuth column a monotone "
          "top fitted to the shaded clear intervals (cross-fitted binomial test); the loss "
          "summed under it")


def steady_clear(clear: pd.DataFrame) -> pd.DataFrame:
    """Clear intervals (``clear``, per inverter) whose neighbours before and after are clear
    too: a steady clear sky. An interval at the bright edge of a cloud passes the band around
    the clear sky, but its deficit is the cloud's (the sensor and the array see the edge at
    different moments); between clouds it has a cloudy neighbour (common practice)."""
    return clear & clear.shift(1, fill_value=False) & clear.shift(-1, fill_value=False)


def deficits(w: Wide, usable: pd.DataFrame) -> pd.DataFrame:
    """Per interval and inverter: 1 - ratio / the day's median ratio (usable intervals)."""
    r = (w.measured / w.expected).where(usable)
    med = r.groupby(w.day.to_numpy()).transform("median")
    return 1 - r / med


MIN_MONTHS = 4  # least blocks for clustered errors (common practice: a few clusters at least)


def _bin_trend(t_years: np.ndarray, y: np.ndarray, where: np.ndarray,
               month: np.ndarray | None = None) -> tuple[float, float, float, str]:
    """OLS trend of a bin's daily deficits, with the day's mean sun position in the bin
    (``where``: columns of elevation and azimuth) as covariates: the sun crosses a bin at
    other places in other seasons, where the model's shape error differs, which a trend
    alone would take as growth. Standard errors robust to heteroscedasticity (HC3) with
    Student's t on values - coefficients degrees of freedom (a bin holds a few tens of
    days, where the normal distribution would overstate the evidence), or,
    with ``month`` (a block number per value) spanning at least four blocks, clustered by
    block with Student's t on blocks - 1 degrees of freedom: deficits of days in the same
    weeks share their weather and sun path (autocorrelated), which HC3 takes as
    independent and so overstates the evidence of a trend. Returns the slope, its
    standard error, the one-sided p-value of growth and the errors' name."""
    x = tools.add_constant(np.column_stack([t_years, where - where.mean(axis=0)]))
    if month is not None and len(np.unique(month)) >= MIN_MONTHS:
        res = linear_model.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": month}, use_t=True)
        errors = "clustered by month"
    else:
        res = linear_model.OLS(y, x).fit(cov_type="HC3", use_t=True)
        errors = "HC3 errors"
    slope, se = float(res.params[1]), float(res.bse[1])
    p_one = float(res.pvalues[1] / 2) if slope > 0 else 1.0
    return slope, se, p_one, errors


def _growth_p(x: np.ndarray) -> float:
    """One-sided p-value of a mean above 0: Student's one-sample t test, t = mean / (s /
    sqrt(n)), s the sample standard deviation, n - 1 degrees of freedom. The sums are those of
    ``scipy.stats.ttest_1samp(x, 0, alternative="greater")`` in its order, so the p-value is
    the same to the digit, without that function's cost per call (a bin is tested each)."""
    n = float(len(x))
    mean = np.mean(x)
    var = np.mean((x - mean) ** 2) * (n / (n - 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = mean / np.sqrt(var / n)
    return float(special.stdtr(n - 1, -t))


def _bin_test(t: np.ndarray, d: np.ndarray, dayno: np.ndarray, where: np.ndarray,
              min_pairs: int = 5) -> dict | None:
    """Growth test of one bin's daily deficits ``d`` (at years ``t`` and day numbers
    ``dayno``; ``where``: columns of the day's mean sun elevation and azimuth in the bin):
    year-on-year pairs (the same sun path a year later, so the model's shape errors there
    cancel) where the data span more than a year, else the OLS trend over time given the
    sun's position in the bin (:func:`_bin_trend`). One-sided p-value of growth and its
    size."""
    if np.ptp(t) >= 1.0 + 10 / 365.25:
        order = np.argsort(dayno)
        dn, dv = dayno[order], d[order]
        pos = np.clip(np.searchsorted(dn, dn + 365), 1, len(dn) - 1)
        near = np.where(np.abs(dn[pos] - dn - 365) <= np.abs(dn[pos - 1] - dn - 365), pos,
                        pos - 1)
        ok = np.abs(dn[near] - dn - 365) <= 3
        delta = dv[near][ok] - dv[ok]
        if len(delta) < min_pairs:
            return None
        return {"test": "year-on-year pairs, one-sided t", "growth_per_year": float(
            np.mean(delta)), "se": float(np.std(delta, ddof=1) / np.sqrt(len(delta))),
                "p_value": _growth_p(delta), "pairs": int(len(delta)),
                "mean_deficit": float(np.mean(d))}
    if np.ptp(t) < 0.25:
        return None
    slope, se, p, errors = _bin_trend(t, d, where, dayno // 30)
    return {"test": f"OLS trend given the sun's place in the bin, {errors}, one-sided",
            "growth_per_year": slope, "se": se, "p_value": p,
            "pairs": int(len(d)), "mean_deficit": float(np.mean(d))}


def _bin_tests(daily: pd.DataFrame, min_days: int
               ) -> tuple[dict[tuple[int, int], dict | None], dict[tuple[int, int], int]]:
    """:func:`_bin_test` of every bin (``daily``: a row per bin and day, columns az, el,
    dayno, t, d, elv, azv) with at least ``min_days`` days, in the order of the bins; and
    the number of days of each. The rows of a bin keep their order (a stable sort)."""
    az, el = daily["az"].to_numpy(), daily["el"].to_numpy()
    order = np.lexsort((el, az))
    az, el = az[order], el[order]
    cols = {c: daily[c].to_numpy()[order] for c in ("t", "d", "dayno")}
    where = daily[["elv", "azv"]].to_numpy()[order]
    change = np.flatnonzero((az[1:] != az[:-1]) | (el[1:] != el[:-1])) + 1
    bounds = np.r_[0, change, len(az)]
    tested, days_in = {}, {}
    for lo, hi in zip(bounds[:-1], bounds[1:], strict=True):
        if hi - lo >= min_days:
            key = (int(az[lo]), int(el[lo]))
            days_in[key] = int(hi - lo)
            # the sun's columns in Fortran order, as a frame's two columns give them (the
            # order of a mean's sums)
            tested[key] = _bin_test(cols["t"][lo:hi], cols["d"][lo:hi], cols["dayno"][lo:hi],
                                    np.asfortranarray(where[lo:hi]))
    return tested, days_in


def _screened(tested: dict[tuple[int, int], dict], min_deficit: float
              ) -> dict[tuple[int, int], dict]:
    """The bins whose mean deficit over the record is at least half of ``min_deficit``: an
    obstruction that has grown from nothing by ``min_deficit`` in a year has cost its bin at
    least that much on average over that year. Only these are tested at the Bonferroni level.
    The screen is independent of the growth test under its null hypothesis (no growth): the
    mean of a regression's values and its slope are uncorrelated when the regression has a
    constant (normal errors: independent); for year-on-year pairs nearly so, a pair's sum
    being uncorrelated with its difference. So the screen keeps the family-wise error rate
    near ``alpha`` while the bins of sky that lost nothing no longer dilute the level (on the
    scenario suite's one-year plants, some 170 bins have a test and 0-15 are screened in).

    References
    ----------
    Independent filtering before multiple testing: Bourgon, Gentleman & Huber 2010, PNAS
    107(21):9546 (from memory).
    """
    return {k: res for k, res in tested.items() if res["mean_deficit"] >= min_deficit / 2}


def _beyond(res: dict, sibling: dict | None, alpha: float) -> bool:
    """Whether a bin's growth (``res``: :func:`_bin_test`) exceeds a sibling inverter's in
    the same bin (``sibling``; True without one): one-sided z test of the difference of the
    two growths over the root sum of squares of their standard errors, level ``alpha``. The
    two estimates share the sky, so their errors are positively correlated and the root sum
    of squares overstates the difference's error: the test dismisses a bin more readily than
    its level says (conservative towards no finding), never less.

    References
    ----------
    Two-sample z test of a difference of independent estimates (common practice).
    """
    if sibling is None or not np.isfinite(sibling["se"]):
        return True
    z = (res["growth_per_year"] - sibling["growth_per_year"]) / np.hypot(res["se"],
                                                                         sibling["se"])
    return bool(stats.norm.sf(z) < alpha)


def detect(w: Wide, usable: pd.DataFrame, rel_sigma: float, horizon: dict[str, tuple],
           clearsky_plane: pd.DataFrame,
           az_step: float = 10.0, el_step: float = 5.0, alpha: float = 0.01,
           min_deficit: float = 0.05, min_days: int = 8, material_share: float = 0.01
           ) -> tuple[list[Event], list[Footprint], pd.DataFrame]:
    """Shading events, footprints, and the mask of the intervals in the shaded region.

    The bins are tested on 10-minute blocks (:func:`coarsen`); the region's boundary and the
    energy are taken on the series as given. An interval is clear when the logged GHI is
    within 20 % of the clear-sky GHI, or without a GHI channel the inverter's plane
    irradiance within 20 % of its clear-sky value (``clearsky_plane``, per inverter).
    """
    if w.ghi.notna().any():
        kt = pd.DataFrame({c: w.ghi / w.clearsky_ghi for c in w.inverters})
    else:
        kt = w.poa / clearsky_plane[w.inverters].where(clearsky_plane[w.inverters] > 0)
    clear = (kt > 0.8) & (kt < 1.2) & w.zenith.lt(88).to_numpy()[:, None]
    # the bins are tested on a steady clear sky alone (:func:`steady_clear`), and the top
    # reported at the end takes the labels under it alone: in the last weeks nothing later
    # can outvote a label from a cloud edge over the array that missed the irradiance sensor
    steady = steady_clear(clear)
    wc, uc, clear_c = coarsen(w, usable, steady, target_s=600.0)

    def grid(x: Wide) -> tuple[np.ndarray, np.ndarray]:
        el = 90 - x.zenith.to_numpy()
        key = (np.floor(x.azimuth.to_numpy() / az_step).astype(int) * 1000
               + np.floor(np.clip(el, 0, None) / el_step).astype(int))
        return el, key

    elev_c, key_c = grid(wc)
    elev, key_all = grid(w)
    column = key_all // 1000
    dayno_c = ((wc.day - wc.day.iloc[0]) / pd.Timedelta(days=1)).to_numpy().astype(int)
    t_c = ((wc.index - w.index[0]) / pd.Timedelta(days=365.25)).to_numpy(dtype=float)
    days = w.day.to_numpy()
    day_pos = np.unique(days, return_inverse=True)[1]
    dfc = deficits(wc, uc)
    events: list[Event] = []
    prints: list[Footprint] = []
    shaded_mask = pd.DataFrame(False, index=w.index, columns=w.inverters)
    step = w.interval_s.to_numpy()
    bins: dict[str, tuple[dict, dict]] = {}  # per inverter: its bins' tests, days per bin
    for inv in w.inverters:
        d = dfc[inv].to_numpy()
        ok = np.isfinite(d) & clear_c[inv].to_numpy() & (elev_c > 0)
        frame = pd.DataFrame({"az": key_c[ok] // 1000, "el": key_c[ok] % 1000,
                              "dayno": dayno_c[ok], "t": t_c[ok], "d": d[ok],
                              "elv": elev_c[ok], "azv": wc.azimuth.to_numpy()[ok]})
        daily = frame.groupby(["az", "el", "dayno"], sort=False).agg(
            t=("t", "mean"), d=("d", "mean"), elv=("elv", "mean"), azv=("azv", "mean")
        ).reset_index()
        tested, days_in = _bin_tests(daily, min_days)
        bins[inv] = ({k: v for k, v in tested.items() if v is not None}, days_in)
    for inv in w.inverters:
        tested, days_in = bins[inv]
        # the bins that have lost light on average (:func:`_screened`) are tested at the
        # Bonferroni level
        screened = _screened(tested, min_deficit)
        n_tests = max(1, len(screened))
        # growth that a sibling inverter shows as much of in the same bin is the sky's or the
        # model's, not an obstruction of this inverter's (:func:`_beyond`)
        common = {k for other in w.inverters if other != inv
                  for k, res in tested.items() if not _beyond(res, bins[other][0].get(k), alpha)}
        keys = {k for k, res in screened.items()
                if res["p_value"] < alpha / n_tests and res["growth_per_year"] >= min_deficit
                and k not in common}
        # an obstruction is one piece: neighbours of a shaded bin join at the plain level
        grown = True
        while grown and keys:
            grown = False
            for k, res in tested.items():
                near = any(abs(k[0] - a) <= 1 and abs(k[1] - e) <= 1 for a, e in keys)
                if k not in keys and near and res["p_value"] < alpha and \
                        res["growth_per_year"] >= min_deficit / 2:
                    keys.add(k)
                    grown = True
        if not keys:
            continue
        # the region: per azimuth column the obstruction's top over time, from which clear
        # intervals lost their beam; the columns of the shaded bins, and their neighbours
        # one by one while each shows shaded intervals beyond the false-label rate
        use = usable[inv].to_numpy()
        clear_all = clear[inv].to_numpy() & (elev > 2)
        steady_all = steady[inv].to_numpy()
        e_int = w.expected[inv].to_numpy()
        near = np.isin(column, sorted({a + k for a, _ in keys for k in (-1, 0, 1)}))
        d_out, _ = _interval_deficits(w, inv, use & ~near, days)
        labels, noise = _shaded_labels(d_out, use & clear_all, ~near, column, elev, day_pos,
                                       az_step, el_step, alpha, min_deficit)
        region = np.zeros(len(w.index), dtype=bool)
        highs: dict[int, np.ndarray] = {}  # per column the highest top that fits as well
        tops: dict[int, dict] = {}
        todo, seen = sorted({a for a, _ in keys}), set()
        while todo:
            a = todo.pop()
            seen.add(a)
            top, high_top, p_col, end = _column_top(column == a, labels, use & clear_all,
                                                    elev, day_pos, noise["false_label_rate"],
                                                    steady_all)
            if p_col < alpha and top[-1] > 0:
                region |= (column == a) & (elev > 0) & (elev < top[day_pos])
                highs[a] = high_top
                tops[a] = {"top_deg": end, "p_value": p_col}
                todo += [b for b in (a - 1, a + 1) if b not in seen and b not in todo]
        if not region.any():
            continue
        # the boundary the data cannot place: under the highest top that fits as well, and
        # in the columns beside the region (not shown shaded, nor shown free of a part of
        # the obstruction) under their neighbour's
        upper = np.zeros(len(w.index), dtype=bool)
        for a, high_top in highs.items():
            upper |= np.isin(column, [a - 1, a, a + 1]) & (elev > 0) & (
                elev < high_top[day_pos])
        d_all, level_e = _interval_deficits(w, inv, use & ~region, days)
        sel = region & np.isfinite(d_all)
        base, base_se = _unshaded_level(d_all, use & clear_all & ~region, key_all, elev,
                                        el_step, days)
        est = level_e * (d_all - base)
        loss = np.where(sel, est, 0.0)
        energy = float(np.sum(loss * step) / 3.6e6)
        if not energy > 0:  # a region, but no loss: no finding
            continue
        shaded_mask[inv] = sel
        # the estimate's error where it is taken: the region's sky bins, unshaded
        x = _daily_error(est, level_e, use & ~region & np.isin(key_all, key_all[sel])
                         & np.isfinite(d_all), days, step)
        e_day = pd.Series(np.where(sel, level_e, 0.0) * step / 3.6e6).groupby(days).sum()
        sigma = float(np.hypot(_loss_sigma_kwh(x, e_day.to_numpy()),
                               _base_sigma_kwh(base_se, level_e, sel, key_all, step)))
        low, high = _boundary_band(energy, rel_sigma, sigma, np.where(
            use & np.isfinite(d_all), est, 0.0), step, upper & ~region, column)
        hits = [{"az": int(a), "el": int(e), **tested[(a, e)],
                 "bonferroni": bool(tested[(a, e)]["p_value"] < alpha / n_tests),
                 "days": days_in[(a, e)]} for a, e in sorted(keys)]
        azs = sorted(tops)
        prof = {a * az_step: t["top_deg"] for a, t in tops.items() if t["top_deg"] > 0}
        proposal = _horizon_proposal(prof, az_step, horizon.get(inv, ()))
        pos = np.flatnonzero(sel)
        # a day's noise: the daily relative error's scale (scaled MAD) on its region
        scale = 1.4826 * float(np.median(np.abs(x - np.median(x)))) if len(x) else 0.0
        first = _material_start(w, loss, e_int, material_share,
                                max(MODEL_FLOOR, scale) * e_day, noise["z"])
        if first is None:  # no day's loss stands out of its noise: the clear-sky geometry
            first = _clear_day_start(w, region, clearsky_plane[inv].to_numpy(dtype=float),
                                     est, level_e, sel & clear_all, material_share)
        ev = Event(
            kind="shading", scope=scope_of(inv),
            start=w.index[pos[0]] if first is None else max(first, w.index[pos[0]]),
            end=w.index[-1] + pd.Timedelta(seconds=float(step[-1])),
            energy_loss_kwh=energy, energy_loss_kwh_low=max(0.0, low),
            energy_loss_kwh_high=high, method=METHOD,
            evidence={"bins": [labelled_bin(h, az_step, el_step) for h in hits],
                      "bins_with_growth_tests": len(tested), "bins_screened_in": n_tests,
                      "alpha_per_bin": alpha / n_tests,
                      "columns": [{"azimuth_from_deg": a * az_step,
                                   "azimuth_to_deg": (a + 1) * az_step, **tops[a]}
                                  for a in azs],
                      "interval_noise": noise},
            detail={"azimuth_from_deg": min(azs) * az_step,
                    "azimuth_to_deg": (max(azs) + 1) * az_step,
                    "top_elevation_deg": round(max(t["top_deg"] for t in tops.values()), 1),
                    "since": w.index[pos[0]].tz_convert(w.tz).date(),
                    "first_arrival": w.index[pos[0]].tz_convert(w.tz).isoformat(),
                    "proposed_horizon": proposal,
                    "note": "an obstruction growing in this part of the sky (vegetation, "
                            "a new building); the proposed horizon adds it to the site file"})
        events.append(ev)
        lo, hi = int(pos[0]), int(pos[-1]) + 1
        with np.errstate(invalid="ignore", divide="ignore"):
            f = np.where(sel[lo:hi] & (e_int[lo:hi] > 0), loss[lo:hi] / e_int[lo:hi], 0.0)
        prints.append(Footprint(ev, lo, hi, [inv], factor=np.nan_to_num(f)[:, None]))
    return events, prints, shaded_mask


def _interval_deficits(w: Wide, inv: str, ref: np.ndarray, days: np.ndarray
                       ) -> tuple[np.ndarray, np.ndarray]:
    """Per interval of inverter ``inv``: the deficit 1 - measured / (expected x the day's
    level) and the expected power at the day's level [W]; the level is the day's median of
    measured/expected over the intervals ``ref`` (a day without any takes its neighbours')."""
    e = w.expected[inv].to_numpy()
    m = w.measured[inv].to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        r = pd.Series(np.where(ref & (e > 0), m / e, np.nan))
    level = r.groupby(days).median()
    level = level.fillna(level.rolling(7, center=True, min_periods=1).median())
    level_e = np.where(e > 0, e, np.nan) * level.reindex(days).to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        return 1 - m / level_e, level_e


MIN_CELL = 10  # least clear intervals for a sky cell's own median (common practice)
MIN_BAND = 30  # least clear intervals for a band's noise (common practice)


def _grown_cells(d: np.ndarray, band: np.ndarray, column: np.ndarray, day_pos: np.ndarray,
                 ref: np.ndarray, z: float, alpha: float
                 ) -> tuple[pd.MultiIndex, list[tuple[int, int]]]:
    """The sky cells (elevation ``band``, azimuth ``column``) with at least ``MIN_CELL``
    ``ref`` intervals, and those of them that an obstruction has reached: the cell's median
    deficit lies above its band's median of cell medians by more than ``z`` times their
    spread (scaled MAD across the band's cells; one-sided: an obstruction only raises a
    deficit), and the cell's daily mean deficits rise with the day (Kendall's tau,
    one-sided, level ``alpha``). A cell raised but steady is the model's error at that place
    in the sky, not an obstruction.

    References
    ----------
    Median and scaled median absolute deviation (Hampel 1974, J. Amer. Statist. Assoc.
    69:383); Kendall's rank correlation as a test of trend (Mann 1945, Econometrica 13:245;
    Kendall 1938, Biometrika 30:81) (all from memory).
    """
    frame = pd.DataFrame({"band": band[ref], "col": column[ref], "d": d[ref],
                          "day": day_pos[ref]})
    g = frame.groupby(["band", "col"])["d"]
    med = g.median()[g.size() >= MIN_CELL]
    centre = med.groupby(level="band").transform("median")
    spread = 1.4826 * (med - centre).abs().groupby(level="band").transform("median")
    grown = []
    for cell in med.index[(med - centre > z * spread).to_numpy()]:
        sub = frame[(frame["band"] == cell[0]) & (frame["col"] == cell[1])]
        daily = sub.groupby("day")["d"].mean()
        if len(daily) > 1 and stats.kendalltau(daily.index, daily.to_numpy(),
                                                alternative="greater").pvalue < alpha:
            grown.append((int(cell[0]), int(cell[1])))
    return med.index, grown


def _shaded_labels(d: np.ndarray, clear: np.ndarray, outside: np.ndarray,
                   column: np.ndarray, elev: np.ndarray, day_pos: np.ndarray,
                   az_step: float, el_step: float, alpha: float, min_deficit: float
                   ) -> tuple[np.ndarray, dict]:
    """Clear intervals whose deficit is beyond the clear-sky noise at their sun elevation
    (one-sided, level ``alpha``) and at least ``min_deficit``: the sun's beam was lost. The
    noise (median and scaled MAD per ``el_step`` band of elevation) is taken from the clear
    intervals outside the candidate columns (``outside``) in sky cells (band x azimuth
    ``column``) of at least ``MIN_CELL`` intervals that an obstruction has not reached
    (:func:`_grown_cells`): an obstruction of several columns reaches beyond the candidate
    ones, and where the sun passes on a few days only (the sky's low edges) a cell cannot
    show whether it is shaded; either would widen the noise that judges the obstruction. A
    band whose judged cells hold fewer than ``MIN_BAND`` intervals keeps all of its own
    (none of its cells can be judged), a band with fewer in all the nearest band's. The
    share of the reference intervals labelled (at least ``alpha``) is the false-label
    rate."""
    z = float(stats.norm.isf(alpha))
    band = np.floor(np.clip(elev, 0, None) / el_step).astype(int)
    ref = clear & outside & np.isfinite(d)
    judged, grown = _grown_cells(d, band, column, day_pos, ref, z, alpha)
    cell = pd.MultiIndex.from_arrays([band, column])
    kept = ref & cell.isin(judged) & ~cell.isin(grown)
    # a band whose judged cells are too few to give its noise keeps all its intervals
    few = pd.Series(kept).groupby(band).transform("sum").to_numpy() < MIN_BAND
    ref &= kept | few
    frame = pd.DataFrame({"band": band[ref], "d": d[ref]})
    g = frame.groupby("band")["d"]
    n = g.size()
    centre = g.median()[n >= MIN_BAND]
    scale = (1.4826 * g.apply(lambda x: np.median(np.abs(x - np.median(x)))))[n >= MIN_BAND]
    left_out = [{"azimuth_from_deg": a * az_step, "elevation_from_deg": b * el_step}
                for b, a in grown]
    if centre.empty:
        return np.zeros(len(d), dtype=bool), {"z": z, "false_label_rate": alpha, "bands": [],
                                              "grown_cells": left_out}
    mid = np.interp(band, centre.index, centre.to_numpy())
    sig = np.interp(band, scale.index, scale.to_numpy())
    with np.errstate(invalid="ignore"):
        labels = clear & np.isfinite(d) & (d - mid > np.maximum(z * sig, min_deficit))
    rate = max(alpha, float(np.mean(labels[ref])))
    return labels, {"z": z, "false_label_rate": rate, "bands": [
        {"elevation_from_deg": float(b * el_step), "median_deficit": float(centre[b]),
         "sigma": float(scale[b])} for b in centre.index], "grown_cells": left_out}


def _column_top(in_col: np.ndarray, labels: np.ndarray, clear: np.ndarray, elev: np.ndarray,
                day_pos: np.ndarray, rate: float, steady: np.ndarray | None = None
                ) -> tuple[np.ndarray, np.ndarray, float, float]:
    """The obstruction's top in one azimuth column on each day [deg] (:func:`_fit_top` on
    the column's labelled clear intervals), the highest top that fits them as well, the
    one-sided binomial p-value of the evidence and the top at the end [deg].

    The evidence is cross-fitted so a fit cannot select its own noise: the top fitted on
    the even days is judged on the odd days' intervals under it and back; under no
    obstruction those are labelled at the column's own rate of labels (at least ``rate``,
    the false-label rate of the sky outside). The top at the end is the lower of the two
    halves' (a label of a single day cannot raise it), fitted to the labels of the
    ``steady`` intervals alone where given.

    References
    ----------
    Sample splitting for inference after selection (Cox 1975, Biometrika 62:441, from
    memory); the binomial test of a count against a known rate (common practice).
    """
    obs = in_col & clear & (elev > 0)
    n_days = int(day_pos.max()) + 1
    if not obs.any():
        return np.zeros(n_days), np.zeros(n_days), 1.0, 0.0
    end = np.inf
    k = n = 0
    for half in (0, 1):
        part = obs & (day_pos % 2 == half)
        fit = _fit_top(part, labels, elev, day_pos)
        end = min(end, float(fit[-1] if steady is None else _fit_top(
            part, labels & steady, elev, day_pos)[-1]))
        under = obs & (day_pos % 2 != half) & (elev < fit[day_pos])
        k += int(np.sum(labels & under))
        n += int(np.sum(under))
    own = max(rate, float(np.mean(labels[obs])))
    p = float(stats.binom.sf(k - 1, n, own)) if k else 1.0
    return (_fit_top(obs, labels, elev, day_pos),
            _fit_top(obs, labels, elev, day_pos, highest=True), p, end)


def _fit_top(obs: np.ndarray, labels: np.ndarray, elev: np.ndarray, day_pos: np.ndarray,
             res_deg: float = 0.5, highest: bool = False) -> np.ndarray:
    """A top per day [deg], never falling, that disagrees with the fewest intervals ``obs``
    (a labelled one at or above the top, an unlabelled one below it): dynamic programming
    over days on a ``res_deg`` grid, the lowest top among equals (the highest with
    ``highest``).

    References
    ----------
    Monotone step fit by dynamic programming (Bellman 1957, Dynamic Programming, from
    memory).
    """
    n_days = int(day_pos.max()) + 1
    grid_n = int(round(90 / res_deg)) + 1
    k = np.clip(np.floor(elev[obs] / res_deg).astype(int), 0, grid_n - 1)
    dp, lab = day_pos[obs], labels[obs]
    shaded = np.zeros((n_days, grid_n + 1))
    np.add.at(shaded, (dp[lab], k[lab]), 1.0)
    # a shaded interval at elevation e disagrees with every top at or below e
    cost = shaded[:, ::-1].cumsum(axis=1)[:, ::-1][:, :grid_n]
    unshaded = np.zeros((n_days, grid_n + 1))
    np.add.at(unshaded, (dp[~lab], k[~lab] + 1), 1.0)
    # an unshaded interval at elevation e disagrees with every top above e
    cost += unshaded.cumsum(axis=1)[:, :grid_n]
    acc = np.empty_like(cost)
    acc[0] = cost[0]
    for i in range(1, n_days):
        acc[i] = cost[i] + np.minimum.accumulate(acc[i - 1])
    def pick(row: np.ndarray) -> int:
        return len(row) - 1 - int(np.argmin(row[::-1])) if highest else int(np.argmin(row))

    idx = np.empty(n_days, dtype=int)
    idx[-1] = pick(acc[-1])
    for i in range(n_days - 2, -1, -1):
        idx[i] = pick(acc[i, :idx[i + 1] + 1])
    return idx * res_deg


def _unshaded_level(d: np.ndarray, ref: np.ndarray, key: np.ndarray, elev: np.ndarray,
                    el_step: float, days: np.ndarray, min_n: int = MIN_CELL
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Per interval, the deficit its sky bin shows unshaded (the model's shape error there)
    and that level's standard error.

    The level is the median over the bin's ``ref`` intervals. Its standard error takes the
    days as the independent draws (the intervals of one day share its sky and its model
    error): the standard deviation of the bin's daily mean deficits over the root of their
    number. A bin with fewer than ``min_n`` intervals or 3 days takes the median of its
    elevation band in every azimuth, and as error the spread (standard deviation) of the
    band's own bin levels around it: the bin's own level differs from the band's by that
    much. A band without two such bins takes 0 and the largest spread of the other bands.
    """
    band = np.floor(np.clip(elev, 0, None) / el_step).astype(int)
    ok = ref & np.isfinite(d)
    frame = pd.DataFrame({"key": key[ok], "day": days[ok], "d": d[ok]})
    g = frame.groupby("key")["d"]
    daily = frame.groupby(["key", "day"])["d"].mean().groupby(level="key")
    own = (g.size() >= min_n) & (daily.size() >= 3)
    level = g.median()[own]
    se = (daily.std(ddof=1) / np.sqrt(daily.size()))[own]
    by_band = pd.Series(d[ok]).groupby(band[ok]).median()
    spread = level.groupby(level.index.to_numpy() % 1000).std(ddof=1).dropna()
    worst = float(spread.max()) if len(spread) else 0.0
    out = pd.Series(key).map(level).to_numpy(dtype=float)
    out_se = pd.Series(key).map(se).to_numpy(dtype=float)
    fallback = pd.Series(band).map(by_band).fillna(0.0).to_numpy(dtype=float)
    fallback_se = pd.Series(band).map(spread).fillna(worst).to_numpy(dtype=float)
    own_bin = np.isfinite(out)
    return np.where(own_bin, out, fallback), np.where(own_bin, out_se, fallback_se)


def _base_sigma_kwh(base_se: np.ndarray, level_e: np.ndarray, sel: np.ndarray,
                    key: np.ndarray, step: np.ndarray) -> float:
    """Standard error [kWh] of the region's loss from the unshaded levels it subtracts
    (``base_se``, :func:`_unshaded_level`): a bin's level is wrong by the same amount on
    every interval of the region in it, so its error times the region's expected energy
    in the bin; the bins' levels come from different intervals, so root sum of squares."""
    per_bin = pd.Series(np.where(sel, base_se * level_e * step / 3.6e6, 0.0)).groupby(
        key).sum()
    return float(np.sqrt(np.sum(per_bin.to_numpy() ** 2)))


def _daily_error(est_w: np.ndarray, level_e: np.ndarray, ref: np.ndarray, days: np.ndarray,
                 step: np.ndarray) -> np.ndarray:
    """The loss estimate's daily relative error: the estimate ``est_w`` summed over the
    unshaded intervals ``ref`` of the region's sky bins (true value zero) over their
    expected energy at the day's level, one value per day with such intervals."""
    kwh = step / 3.6e6
    err = pd.Series(np.where(ref, est_w * kwh, 0.0)).groupby(days).sum()
    base = pd.Series(np.where(ref, level_e * kwh, 0.0)).groupby(days).sum()
    return (err / base.where(base > 0)).dropna().to_numpy()


def _loss_sigma_kwh(x: np.ndarray, e_day_kwh: np.ndarray) -> float:
    """Standard error [kWh] of the region's summed loss: the long-run scale of the daily
    relative error ``x`` (:func:`_daily_error`; autocorrelation-aware,
    :func:`long_run_sigma`, at least ``MODEL_FLOOR``) times the root sum of squares of the
    region's daily expected energy ``e_day_kwh``."""
    sig, _ = long_run_sigma(x)
    sig = max(MODEL_FLOOR, sig if np.isfinite(sig) else 0.0)
    return float(sig * np.sqrt(np.sum(e_day_kwh ** 2)))


def _boundary_band(energy: float, rel_sigma: float, sigma_kwh: float, est_w: np.ndarray,
                   step: np.ndarray, above: np.ndarray, column: np.ndarray
                   ) -> tuple[float, float]:
    """95 % band of the region's loss [kWh]: the model's relative error (``rel_sigma``: the
    expected power of a shaded module is the model's too) and the noise (``sigma_kwh``),
    normal, and upwards the loss estimated (``est_w``) on the intervals ``above`` the
    region that the data cannot tell from it (summed per azimuth ``column``, where
    positive), added in quadrature."""
    low, high = energy_band(energy, rel_sigma, sigma_kwh)
    per_column = pd.Series(np.where(above, est_w, 0.0) * step / 3.6e6).groupby(column).sum()
    up = float(per_column.clip(lower=0.0).sum())
    return low, energy + float(np.hypot(high - energy, up))


def _material_start(w: Wide, loss: np.ndarray, expected: np.ndarray, share: float,
                    noise_kwh: pd.Series, z: float) -> pd.Timestamp | None:
    """Start (UTC) of the first site-local day whose loss exceeds ``share`` of the day's
    expected energy and ``z`` times the day's noise (``noise_kwh``, per day: one-sided
    test of the day's loss); None when none does."""
    days = w.day.to_numpy()
    step = w.interval_s.to_numpy()
    lost = pd.Series(loss * step / 3.6e6).groupby(days).sum()
    exp = pd.Series(np.where(np.isfinite(expected) & (expected > 0), expected, 0.0) * step
                    / 3.6e6).groupby(days).sum()
    over = lost.index[((lost > share * exp) & (lost > z * noise_kwh.reindex(lost.index)))
                      .to_numpy()]
    if not len(over):
        return None
    return pd.Timestamp(over[0]).tz_localize(w.tz).tz_convert("UTC")


def _clear_day_start(w: Wide, region: np.ndarray, cs_plane: np.ndarray, est_w: np.ndarray,
                     level_e: np.ndarray, clear_in: np.ndarray, share: float
                     ) -> pd.Timestamp | None:
    """Start (UTC) of the first site-local day whose loss under a clear sky exceeds ``share``
    of the day's energy: the region's share of the day's clear-sky plane irradiance
    (``cs_plane``) times the region's mean relative loss on its clear intervals
    (``clear_in``: the loss estimate ``est_w`` over the expected power at the day's level
    ``level_e``, energy-weighted). The region's top is fitted over the whole history, so the
    day follows the obstruction's growth and the sun's path rather than a single day's
    noise. None when no day does."""
    days = w.day.to_numpy()
    step = w.interval_s.to_numpy()
    ok = clear_in & np.isfinite(est_w) & np.isfinite(level_e)
    if not ok.any() or not np.sum(level_e[ok] * step[ok]) > 0:
        return None
    rel = float(np.sum(est_w[ok] * step[ok]) / np.sum(level_e[ok] * step[ok]))
    cs = np.where(np.isfinite(cs_plane) & (cs_plane > 0), cs_plane, 0.0) * step
    under = pd.Series(np.where(region, cs, 0.0)).groupby(days).sum()
    whole = pd.Series(cs).groupby(days).sum()
    over = under.index[(rel * under > share * whole).to_numpy()]
    if not len(over):
        return None
    return pd.Timestamp(over[0]).tz_localize(w.tz).tz_convert("UTC")


def labelled_bin(h: dict, az_step: float, el_step: float) -> dict:
    """A sky bin for the evidence: its azimuth and elevation ranges in degrees instead of the
    bin indices (``az``, ``el``)."""
    return {"azimuth_from_deg": h["az"] * az_step, "azimuth_to_deg": (h["az"] + 1) * az_step,
            "elevation_from_deg": h["el"] * el_step,
            "elevation_to_deg": (h["el"] + 1) * el_step,
            **{k: v for k, v in h.items() if k not in ("az", "el")}}


def _horizon_proposal(prof: dict[float, float], az_step: float, existing: tuple
                      ) -> list[list[float]]:
    """Existing horizon points plus the obstruction's top at each shaded azimuth bin."""
    pts = {float(a): float(e) for a, e in existing}
    for a0, top in prof.items():
        for a in (a0, a0 + az_step):
            base = float(np.interp(a, [p[0] for p in existing], [p[1] for p in existing])) \
                if existing else 0.0
            pts[float(a)] = max(pts.get(float(a), base), top)
    return [[a, round(e, 1)] for a, e in sorted(pts.items())]
