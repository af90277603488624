"""Shading growth: beam losses in a region of the sky that grow over the months (a tree, a new
building).

Per inverter, clear-sky intervals (GHI within ±20 % of the clear-sky GHI) are binned by sun
azimuth (``az_step`` degrees) and elevation (``el_step`` degrees). The deficit of an interval is
1 - (measured/expected) / (the day's median of measured/expected), so what the whole day
shares (soiling, degradation, a lost string, model bias of the day) cancels. Per bin, growth is
tested on the daily mean deficits: with more than a year of data, year-on-year pairs (the same
sun position a year later; the model's own shape errors at that sun position repeat and cancel)
with a one-sided t test; with less, the trend over time (statsmodels OLS; standard errors
clustered by month where the bin's days span four months or more, HC3 otherwise) of the
deficits, and, where the plane irradiance is decomposed from GHI, of the deficits less the
median deficit at the same elevation on the other side of the sky in the same weeks too
(:func:`same_elevation_control`: seen in two seasons only, a bin's trend would otherwise take
the decomposition's seasonal error at that elevation for growth; an obstruction standing
alike on both sides at the same elevation is not told from that error).
A bin whose one-sided p-value is below ``alpha`` divided by the number of bins tested
(Bonferroni) and whose growth is at least ``min_deficit`` per year is shaded by a growing
obstruction; its neighbouring bins join the region at the plain level ``alpha`` (an
obstruction is one connected piece), and so do the bins below it down to the horizon (an
obstruction stands on the ground). In each such bin a change-point search on its deficits
gives the unshaded level (the first segment) and the day the shade arrived (the first segment
above it by ``min_deficit``). The shaded bins of one inverter make one event (bins of one
obstruction need not touch: between two shaded bins a bin with few clear days is not
significant, and a region apart would start the finding at its own small loss): the
azimuth range, the top elevation, the first arrival (the event lasts to the end of the data:
the obstruction is still there), the energy (each interval's deficit above its bin's unshaded
level, since the arrival, against the day's ratio outside the shaded bins) and a proposed
horizon profile. The event starts on the first day its loss is material: the day from which
the loss estimated for the region, as a share of the inverter's expected energy of the day
(median over ``smooth_days`` days centred on it, as one day's estimate carries the day's noise),
exceeds ``material_share`` (1 %, common practice); the bins' arrival times are kept in the
evidence (the shade is there, small, from the first of them).

``min_deficit`` 5 % of the interval's power, common practice; ``alpha`` 0.01.

References
----------
Regression over time: ordinary least squares with heteroscedasticity-consistent errors
(MacKinnon & White 1985, J. Econometrics 29:305, HC3); clustered standard errors with t on
clusters - 1 degrees of freedom (Cameron & Miller 2015, J. Human Resources 50(2):317) (both
from memory). The binning by sun
position follows the usual shading-loss diagrams (common practice).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perfcheck.detect.common import (
    Event,
    Footprint,
    Wide,
    change_points,
    coarsen,
    energy_band,
    scope_of,
)
from perfcheck.lazy import lazy_module

sm = lazy_module("statsmodels.api")
stats = lazy_module("scipy.stats")

METHOD = ("deficit against the day's median ratio binned by sun azimuth and elevation, OLS "
          "trend over time per bin (errors clustered by month, or HC3), also less the same "
          "elevation on the other side of the sky where the plane irradiance is decomposed "
          "from GHI, Bonferroni over bins")


def deficits(w: Wide, usable: pd.DataFrame) -> pd.DataFrame:
    """Per interval and inverter: 1 - ratio / the day's median ratio (usable intervals)."""
    r = (w.measured / w.expected).where(usable)
    med = r.groupby(w.day.to_numpy()).transform("median")
    return 1 - r / med


MIN_MONTHS = 4  # least blocks for clustered errors (common practice: a few clusters at least)


def _bin_trend(t_years: np.ndarray, y: np.ndarray, month: np.ndarray | None = None
               ) -> tuple[float, float, float, float]:
    """OLS trend of a bin's daily deficits; standard errors robust to heteroscedasticity
    (HC3), or, with ``month`` (a block number per value) spanning at least four blocks,
    clustered by block with Student's t on blocks - 1 degrees of freedom: deficits of days
    in the same weeks share their weather and sun path (autocorrelated), which HC3 takes as
    independent and so overstates the evidence of a trend."""
    x = sm.add_constant(t_years)
    if month is not None and len(np.unique(month)) >= MIN_MONTHS:
        res = sm.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": month}, use_t=True)
    else:
        res = sm.OLS(y, x).fit(cov_type="HC3")
    slope, se = float(res.params[1]), float(res.bse[1])
    p_one = float(res.pvalues[1] / 2) if slope > 0 else 1.0
    return slope, se, float(res.params[0]), p_one


def same_elevation_control(daily: pd.DataFrame, n_az: int, half_window_days: int = 15
                           ) -> np.ndarray:
    """Per row of ``daily`` (a bin's mean deficit of a day: ``az``, ``el``, ``dayno``, ``d``),
    the median deficit of the same elevation band on the other side of the sky (azimuth bins
    more than one bin away, circularly) within ``half_window_days`` of the day; NaN where
    there is none.

    The sun passes every elevation twice a day, once each side of the meridian, at the same
    air mass, so the model's errors that depend on elevation and season (the split of GHI
    into beam and diffuse, the spectrum) are the same on both sides in the same weeks, while
    an obstruction stands on one side. Only for rows whose plane irradiance is all
    decomposed from GHI (the POA used is the modelled one): a POA sensor's reading has no
    such error, and its transposition to a plane other than its own errs differently on the
    two sides. The window is the half month of the clustering block of :func:`_bin_trend`
    (common practice)."""
    out = np.full(len(daily), np.nan)
    az = daily["az"].to_numpy()
    el = daily["el"].to_numpy()
    dn = daily["dayno"].to_numpy()
    d = daily["d"].to_numpy()
    for e in np.unique(el):
        band = el == e
        for a in np.unique(az[band]):
            rows = np.flatnonzero(band & (az == a))
            sep = np.abs(az - a) % n_az
            others = np.flatnonzero(band & (np.minimum(sep, n_az - sep) > 1))
            near = np.abs(dn[rows][:, None] - dn[others][None, :]) <= half_window_days
            has = near.any(axis=1)
            if has.any():
                vals = np.where(near[has], d[others][None, :], np.nan)
                out[rows[has]] = np.nanmedian(vals, axis=1)
    return out


def _bin_test(g: pd.DataFrame, min_pairs: int = 5, min_days: int = 8) -> dict | None:
    """Growth test of one bin's daily deficits: year-on-year pairs where the data allow,
    else the OLS trend over time (:func:`_bin_trend`) of the deficits, and where the band
    has values on the other side of the sky in the same weeks (column ``c``,
    :func:`same_elevation_control`) of the deficits less those too: over less than a year a
    bin is seen in two seasons, and the model's seasonal error at that elevation would pass
    for growth. Both must show it (an intersection-union test, Berger 1982, Technometrics
    24:295, from memory: the larger p-value, the smaller growth); fewer than ``min_days``
    controlled days: not tested. One-sided p-value of growth and its size."""
    t = g["t"].to_numpy()
    d = g["d"].to_numpy()
    if np.ptp(t) >= 1.0 + 10 / 365.25:
        dn = g["dayno"].to_numpy()
        order = np.argsort(dn)
        dn, dv = dn[order], d[order]
        pos = np.clip(np.searchsorted(dn, dn + 365), 1, len(dn) - 1)
        near = np.where(np.abs(dn[pos] - dn - 365) <= np.abs(dn[pos - 1] - dn - 365), pos,
                        pos - 1)
        ok = np.abs(dn[near] - dn - 365) <= 3
        delta = dv[near][ok] - dv[ok]
        if len(delta) < min_pairs:
            return None
        res = stats.ttest_1samp(delta, 0.0, alternative="greater")
        return {"test": "year-on-year pairs, one-sided t", "growth_per_year": float(
            np.mean(delta)), "p_value": float(res.pvalue), "pairs": int(len(delta))}
    if np.ptp(t) < 0.25:
        return None
    dayno = g["dayno"].to_numpy()
    slope, se, icpt, p = _bin_trend(t, d, dayno // 30)
    out = {"test": "OLS trend, clustered by month, one-sided", "growth_per_year": slope,
           "p_value": p, "pairs": int(len(d))}
    c = g["c"].to_numpy() if "c" in g else np.full(len(d), np.nan)
    keep = np.isfinite(c)
    if not keep.any():
        return out
    if keep.sum() < min_days or np.ptp(t[keep]) < 0.25:
        return None
    slope_c, se, icpt, p_c = _bin_trend(t[keep], d[keep] - c[keep], dayno[keep] // 30)
    # both must show growth (intersection-union test: the p-value is the larger one)
    return {"test": out["test"] + ", alone and less the other side of the sky at the same "
            "elevation", "growth_per_year": min(slope, slope_c), "p_value": max(p, p_c),
            "pairs": int(keep.sum())}


def _baseline_onset(g: pd.DataFrame, min_deficit: float, alpha: float) -> tuple[float, float]:
    """The bin's unshaded deficit level (model shape error) and the time the shade arrived
    [years], from the first segment of a change-point search and the first segment above it."""
    g = g.sort_values("t")
    x = g["d"].to_numpy()
    segs = change_points(x, alpha=alpha, min_size=3)
    base = segs[0].mean
    for sg in segs[1:]:
        if sg.mean >= base + min_deficit:
            return base, float(g["t"].to_numpy()[sg.start])
    return base, float(g["t"].to_numpy()[0])


def detect(w: Wide, usable: pd.DataFrame, rel_sigma: float, horizon: dict[str, tuple],
           az_step: float = 10.0, el_step: float = 5.0, alpha: float = 0.01,
           min_deficit: float = 0.05, min_days: int = 8, material_share: float = 0.01,
           smooth_days: int = 15) -> tuple[list[Event], list[Footprint], pd.DataFrame]:
    """Shading events, footprints, and the mask of the intervals in shaded bins.

    The bins are tested on 10-minute blocks (:func:`coarsen`); the energy is taken on the
    series as given.
    """
    wc, uc = coarsen(w, usable, 600.0)
    kt = wc.ghi / wc.clearsky_ghi
    clear_iv = (kt > 0.8) & (kt < 1.2) & (wc.zenith < 88)
    t0 = w.index[0]

    def grid(x: Wide) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        el = 90 - x.zenith.to_numpy()
        key = (np.floor(x.azimuth.to_numpy() / az_step).astype(int) * 1000
               + np.floor(np.clip(el, 0, None) / el_step).astype(int))
        return el, key, ((x.index - t0) / pd.Timedelta(days=365.25)).to_numpy(dtype=float)

    elev_c, key_c, t_c = grid(wc)
    elev, key_all, t_years = grid(w)
    dayno_c = ((wc.day - wc.day.iloc[0]) / pd.Timedelta(days=1)).to_numpy().astype(int)
    days = w.day.to_numpy()
    dfc = deficits(wc, uc)
    events: list[Event] = []
    prints: list[Footprint] = []
    shaded_mask = pd.DataFrame(False, index=w.index, columns=w.inverters)
    step = w.interval_s.to_numpy()
    for inv in w.inverters:
        d = dfc[inv].to_numpy()
        ok = np.isfinite(d) & clear_iv.to_numpy() & (elev_c > 0)
        modelled = np.isclose(wc.poa[inv].to_numpy(), wc.poa_modelled[inv].to_numpy(),
                              rtol=1e-9, atol=0.0)
        frame = pd.DataFrame({"az": key_c[ok] // 1000, "el": key_c[ok] % 1000,
                              "dayno": dayno_c[ok], "t": t_c[ok], "d": d[ok],
                              "ghi": modelled[ok]})
        daily = frame.groupby(["az", "el", "dayno"], sort=False).agg(
            t=("t", "mean"), d=("d", "mean"), ghi=("ghi", "all")).reset_index()
        # the control where the plane irradiance is all decomposed from GHI (a sensor's
        # reading carries no decomposition error; its transposition to another plane errs
        # on one side)
        decomposed = daily["ghi"].to_numpy()
        daily["c"] = np.nan
        daily.loc[decomposed, "c"] = same_elevation_control(daily[decomposed],
                                                            int(round(360 / az_step)))
        groups = {k: g for k, g in daily.groupby(["az", "el"]) if len(g) >= min_days}
        tested = {k: _bin_test(g, min_days=min_days) for k, g in groups.items()}
        tested = {k: v for k, v in tested.items() if v is not None}
        n_tests = max(1, len(tested))
        keys = {k for k, res in tested.items()
                if res["p_value"] < alpha / n_tests and res["growth_per_year"] >= min_deficit}
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
        hits = []
        for a, e in keys:
            base, onset = _baseline_onset(groups[(a, e)], min_deficit, alpha)
            hits.append({"az": int(a), "el": int(e), **tested[(a, e)],
                         "bonferroni": bool(tested[(a, e)]["p_value"] < alpha / n_tests),
                         "unshaded_deficit": base, "onset_years": onset,
                         "days": int(len(groups[(a, e)]))})
        hits += _below(hits, groups, key_c, elev_c, d, t_c)
        region_keys = np.isin(key_all, [h["az"] * 1000 + h["el"] for h in hits])
        # the day's reference ratio from the intervals outside the shaded bins
        r = (w.measured[inv] / w.expected[inv]).where(usable[inv] & ~region_keys)
        daily_med = r.groupby(days).median()
        # a day without usable intervals (flagged readings) takes its neighbours' ratio
        daily_med = daily_med.fillna(daily_med.rolling(7, center=True, min_periods=1).median())
        med = daily_med.reindex(days).to_numpy()
        e_int = w.expected[inv].to_numpy()
        d_all = 1 - w.measured[inv].to_numpy() / np.where(e_int > 0, e_int * med, np.nan)
        for region in [hits] if hits else []:
            loss = np.zeros(len(w.index))
            sel = np.zeros(len(w.index), dtype=bool)
            for h in region:
                m = (key_all == h["az"] * 1000 + h["el"]) & (elev > 0) & (
                    t_years >= h["onset_years"])
                m &= np.isfinite(d_all)
                loss[m] = e_int[m] * med[m] * (d_all[m] - h["unshaded_deficit"])
                sel |= m
            if not sel.any():
                continue
            energy = float(np.sum(loss * step) / 3.6e6)
            if not energy > 0:  # growth in the bins' deficits, but no loss: no finding
                continue
            shaded_mask[inv] = shaded_mask[inv].to_numpy() | sel
            low, high = energy_band(energy, rel_sigma, float(np.sqrt(np.nansum(
                (np.where(sel, e_int, 0.0) * rel_sigma * step / 3.6e6) ** 2))) * 3)
            tested_bins = [h for h in region if h["p_value"] is not None] or region
            azs = [h["az"] for h in tested_bins]
            els = [h["el"] for h in tested_bins]
            onset = t0 + pd.Timedelta(days=365.25 * min(h["onset_years"] for h in region))
            prof: dict[float, float] = {}
            for h in tested_bins:
                a0 = h["az"] * az_step
                prof[a0] = max(prof.get(a0, 0.0), (h["el"] + 1) * el_step)
            proposal = _horizon_proposal(prof, az_step, horizon.get(inv, ()))
            pos = np.flatnonzero(sel)
            first = _material_start(w, loss, e_int, material_share, smooth_days)
            ev = Event(
                kind="shading", scope=scope_of(inv), start=max(first, w.index[pos[0]]),
                end=w.index[-1] + pd.Timedelta(seconds=float(step[-1])),
                energy_loss_kwh=energy, energy_loss_kwh_low=max(0.0, low),
                energy_loss_kwh_high=high, method=METHOD,
                evidence={"bins": [labelled_bin(h, az_step, el_step) for h in region],
                          "bins_tested": n_tests,
                          "alpha_per_bin": alpha / n_tests},
                detail={"azimuth_from_deg": min(azs) * az_step,
                        "azimuth_to_deg": (max(azs) + 1) * az_step,
                        "top_elevation_deg": (max(els) + 1) * el_step,
                        "since": onset.tz_convert(w.tz).date(),
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


def _material_start(w: Wide, loss: np.ndarray, expected: np.ndarray, share: float,
                    smooth_days: int) -> pd.Timestamp:
    """Start (UTC) of the first site-local day whose smoothed loss share of the day's
    expected energy exceeds ``share`` (the first interval of the data when none does)."""
    days = w.day.to_numpy()
    step = w.interval_s.to_numpy()
    lost = pd.Series(loss * step).groupby(days).sum()
    exp = pd.Series(np.where(np.isfinite(expected) & (expected > 0), expected, 0.0) * step
                    ).groupby(days).sum()
    ratio = (lost / exp.where(exp > 0)).rolling(smooth_days, center=True, min_periods=3).median()
    over = ratio.index[ratio.to_numpy() > share]
    if not len(over):
        return w.index[0]
    return pd.Timestamp(over[0]).tz_localize(w.tz).tz_convert("UTC")


def labelled_bin(h: dict, az_step: float, el_step: float) -> dict:
    """A sky bin for the evidence: its azimuth and elevation ranges in degrees instead of the
    bin indices (``az``, ``el``)."""
    return {"azimuth_from_deg": h["az"] * az_step, "azimuth_to_deg": (h["az"] + 1) * az_step,
            "elevation_from_deg": h["el"] * el_step,
            "elevation_to_deg": (h["el"] + 1) * el_step,
            **{k: v for k, v in h.items() if k not in ("az", "el")}}


def _below(hits: list[dict], groups: dict, key_all: np.ndarray, elev: np.ndarray,
           d: np.ndarray, t_years: np.ndarray) -> list[dict]:
    """Bins under the lowest shaded bin of each azimuth column, down to the horizon (an
    obstruction stands on the ground, so the sun below its top is behind it too; these bins
    seldom have enough clear intervals to be tested) and the bin above the top. Each takes
    its column's arrival time and its own unshaded level from the intervals before it (else
    the column's)."""
    out = []
    have = {(h["az"], h["el"]) for h in hits}
    for a in sorted({h["az"] for h in hits}):
        col = sorted((h for h in hits if h["az"] == a), key=lambda h: h["el"])
        low = col[0]
        onset = min(h["onset_years"] for h in col)
        top = col[-1]["el"]
        # and the bin just above the top: the obstruction grows into it during the last
        # months, before that bin's own test can show it (unshaded there, it adds only noise)
        for e in [*range(0, low["el"]), top + 1]:
            if (a, e) in have:
                continue
            m = (key_all == a * 1000 + e) & (elev > 0) & np.isfinite(d) & (t_years < onset)
            base = float(np.median(d[m])) if m.sum() >= 3 else low["unshaded_deficit"]
            out.append({"az": a, "el": e, "test": "next to a shaded bin (not tested)",
                        "growth_per_year": None, "p_value": None, "pairs": 0,
                        "bonferroni": False, "unshaded_deficit": base, "onset_years": onset,
                        "days": int(len(groups.get((a, e), [])))})
    return out


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
