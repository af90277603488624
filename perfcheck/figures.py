"""The report's figures: one small function per figure, each returning a matplotlib Figure.

Figures are built on ``matplotlib.figure.Figure`` directly (no pyplot state, Agg canvas), so
they can be written to PNG for the HTML report and to pages of the PDF. Inputs are the aligned
frame (``perfcheck.align.load_aligned``: one row per instant and inverter, ``ts`` in UTC) and
parts of the ``perfcheck check`` result. Every function draws something readable even when its
data is missing (a note on the axes), so a report never has a blank figure.
"""

from __future__ import annotations

import io
import textwrap
from collections.abc import Callable
from typing import Any

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402
from matplotlib.transforms import Bbox  # noqa: E402
from PIL import Image  # noqa: E402

from perfcheck import kinds  # noqa: E402

# Our palette for this report: ink on warm paper, teal for what was measured, ochre for what the
# model expected, brick for losses; causes get a fixed colour each so figures and tables agree.
INK = "#23262b"
PAPER = "#fbfaf6"
GRID = "#e3e0d6"
MEASURED = "#16706b"
EXPECTED = "#c98b2b"
LOSS = "#a4432f"
MUTED = "#8a8d93"
FLAG_COLOURS = ("#16706b", "#c98b2b", "#a4432f", "#3d5a80", "#8f7ab8", "#6b8f71", "#c27c9e")

MARKERS = ("o", "s", "^", "D", "v", "P", "X")  # one per inverter in the scatter

WIDTH_IN, HEIGHT_IN = 7.6, 3.6
DPI = 160  # one rendering serves the HTML (scaled to the page width) and the PDF


# About where _place puts a panel (fractions of the figure), so that its one measuring pass
# sees the panel at about its final size, with the ticks that are drawn
NEAR_PLACE = {"left": 0.075, "right": 0.99, "bottom": 0.15, "top": 0.935}


def _figure(height: float = HEIGHT_IN, ncols: int = 1,
            layout: str | None = None) -> tuple[Figure, list]:
    """A figure of ``ncols`` panels in a row. Without a ``layout`` engine, :func:`pixels`
    places the panel once with :func:`_place` (one panel, its twin, figure legends below)."""
    fig = Figure(figsize=(WIDTH_IN, height), dpi=DPI, facecolor=PAPER, layout=layout)
    FigureCanvasAgg(fig)
    axes = fig.subplots(1, ncols, squeeze=False,
                        gridspec_kw=None if layout else NEAR_PLACE)[0].tolist()
    for ax in axes:
        ax.set_facecolor("white")
        ax.grid(True, color=GRID, linewidth=0.6)
        ax.set_axisbelow(True)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.tick_params(colors=INK, labelsize=8)
    return fig, axes


def _note(ax, text: str) -> None:
    ax.text(0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color=MUTED,
            fontsize=10, bbox=dict(facecolor=PAPER, edgecolor=GRID, boxstyle="round,pad=0.6"))


def _title(ax, text: str) -> None:
    ax.set_title(text, loc="left", fontsize=10, color=INK, fontweight="bold")


def _daily_panel(title: str, per_day: Callable[[pd.DataFrame, str], pd.DataFrame],
                 aligned: pd.DataFrame, tz: str) -> tuple[Figure, Any, pd.DataFrame]:
    """A one-panel figure titled ``title`` and ``per_day(aligned, tz)``; without aligned data
    the frame is empty and the panel says so."""
    fig, (ax,) = _figure()
    _title(ax, title)
    d = per_day(aligned, tz) if len(aligned) else pd.DataFrame()
    if d.empty:
        _note(ax, "no aligned data in this period")
    return fig, ax, d


def energy_kwh(power_w: pd.Series, interval_s: pd.Series) -> pd.Series:
    """Energy of each interval [kWh] from its mean power [W] and length [s]."""
    return power_w * interval_s / 3.6e6


def local_days(aligned: pd.DataFrame, tz: str) -> pd.Series:
    """The site-local calendar day of each row (day boundaries follow the site's zone)."""
    return aligned["ts"].dt.tz_convert(tz).dt.tz_localize(None).dt.normalize()


def daily_energy(aligned: pd.DataFrame, tz: str) -> pd.DataFrame:
    """Plant daily measured, expected and unlimited expected energy [kWh], indexed by day."""
    df = pd.DataFrame({
        "day": local_days(aligned, tz),
        "measured_kwh": energy_kwh(aligned["measured_ac_w"], aligned["interval_s"]),
        "expected_kwh": energy_kwh(aligned["expected_ac_w"], aligned["interval_s"]),
        "rain_mm": aligned["rain_mm"],
        "inverter_id": aligned["inverter_id"],
    })
    sums = df.groupby("day")[["measured_kwh", "expected_kwh"]].sum(min_count=1)
    # rain is a site quantity repeated on every inverter's row: count it once
    first = df["inverter_id"] == df["inverter_id"].iloc[0] if len(df) else df["inverter_id"]
    sums["rain_mm"] = df[first].groupby("day")["rain_mm"].sum(min_count=1)
    return sums


# Beyond this many days a bar per day is an unreadable block: weeks are shown instead
# (common practice).
MAX_DAILY_BARS = 120


def weekly_energy(daily: pd.DataFrame) -> pd.DataFrame:
    """Daily sums summed to weeks (Monday to Sunday), labelled by their Monday."""
    return daily.resample("W-MON", label="left", closed="left").sum(min_count=1)


def fig_daily_energy(aligned: pd.DataFrame, tz: str) -> Figure:
    """Daily (beyond ``MAX_DAILY_BARS`` days: weekly) measured against expected plant energy,
    the gap shaded."""
    fig, ax, d = _daily_panel("Daily energy: measured against expected", daily_energy,
                              aligned, tz)
    if d.empty:
        return fig
    per = "day"
    if len(d) > MAX_DAILY_BARS:
        d, per = weekly_energy(d), "week"
        _title(ax, "Weekly energy (Monday to Sunday): measured against expected")
    x = d.index
    ax.fill_between(x, d["measured_kwh"], d["expected_kwh"],
                    where=d["expected_kwh"] > d["measured_kwh"], color=LOSS, alpha=0.3,
                    step="mid", label="shortfall")
    width = 0.8 if per == "day" else 5.6
    ax.bar(x, d["measured_kwh"], width=width, color=MEASURED, alpha=0.85, label="measured")
    ax.step(x, d["expected_kwh"], where="mid", color=EXPECTED, lw=1.2, label="expected")
    top = np.nanmax(d[["measured_kwh", "expected_kwh"]].to_numpy(float))
    ax.set_ylim(0, 1.05 * top if np.isfinite(top) and top > 0 else 1)  # bars from zero
    ax.set_ylabel(f"energy per {per} [kWh]", fontsize=8)
    fig.legend(*ax.get_legend_handles_labels(), fontsize=8, frameon=False, ncols=3,
               loc="outside lower center")
    fig.autofmt_xdate()
    return fig


def fig_monthly_pr(monthly: list[dict]) -> Figure:
    """Monthly PR, temperature-corrected PR and EPI, each with its interval."""
    fig, (ax,) = _figure()
    _title(ax, "Monthly performance ratio with intervals")
    series = [("pr", "PR", MEASURED), ("pr_temp_corrected", "PR, temperature-corrected", INK),
              ("epi", "EPI (measured / expected)", EXPECTED)]
    months = [m["month"] for m in monthly]
    x = np.arange(len(months))
    drawn = False
    for k, (key, label, colour) in enumerate(series):
        v = np.array([_num(m.get(key)) for m in monthly])
        lo = np.array([_num(m.get(f"{key}_ci_low")) for m in monthly])
        hi = np.array([_num(m.get(f"{key}_ci_high")) for m in monthly])
        if np.all(np.isnan(v)):
            continue
        drawn = True
        xs = x + (k - 1) * 0.18
        ax.errorbar(xs, v, yerr=[v - lo, hi - v], fmt="o", color=colour, ms=5, capsize=3,
                    lw=1.2, label=label)
    if not drawn:
        _note(ax, "no month had enough data for a value")
        return fig
    every = -(-len(months) // 12)  # at most 12 labels, so they never run into each other
    ax.set_xticks(x[::every], months[::every], fontsize=8)
    ax.set_xlim(-0.6, len(months) - 0.4)
    ax.set_ylabel("ratio [-]", fontsize=8)
    ax.legend(fontsize=8, frameon=False, ncols=3, loc="upper center",
              bbox_to_anchor=(0.5, -0.1))
    return fig


def fig_loss_attribution(losses: dict) -> Figure:
    """From expected to measured energy: one bar per cause, unexplained last."""
    fig, (ax,) = _figure()
    _title(ax, "Where the expected energy went")
    if not losses or not losses.get("expected_kwh"):
        _note(ax, "no loss attribution in this period")
        return fig
    causes = [(k, v) for k, v in losses.get("by_cause_kwh", {}).items() if v]
    causes.append(("unexplained", losses.get("unexplained_kwh", 0.0)))
    # the axis holds about 110 characters of its 7-point labels: narrower lines for more bars
    width = max(8, min(14, 110 // (len(causes) + 2)))
    labels = ["expected"] + [textwrap.fill(kinds.words(k), width, break_long_words=False)
                             for k, _ in causes] + ["measured"]
    level = losses["expected_kwh"]
    ax.bar(0, level, color=EXPECTED, width=0.6)
    for i, (kind, kwh) in enumerate(causes, start=1):
        ax.bar(i, -kwh, bottom=level, color=kinds.colour(kind), width=0.6)
        ax.text(i, max(level, level - kwh), f"{kwh:,.0f}", ha="center", va="bottom", fontsize=7,
                color=INK)
        level -= kwh
    ax.bar(len(causes) + 1, losses["measured_kwh"], color=MEASURED, width=0.6)
    for i, v in ((0, losses["expected_kwh"]), (len(causes) + 1, losses["measured_kwh"])):
        ax.text(i, v, f"{v:,.0f}", ha="center", va="bottom", fontsize=7, color=INK)
    ax.set_xticks(range(len(labels)), labels, fontsize=7)
    lo = min(losses["measured_kwh"], losses["expected_kwh"])
    hi = max(losses["measured_kwh"], losses["expected_kwh"])
    bottom = lo - 0.6 * (hi - lo) - 0.02 * hi
    ax.set_ylim(bottom, hi + 0.12 * (hi - lo) + 0.01 * hi)
    if bottom > 0:
        _axis_break(ax, len(causes) + 2)
    ax.set_ylabel("energy [kWh]", fontsize=8)
    return fig


def _axis_break(ax, n_bars: int) -> None:
    """Mark a value axis that does not start at zero: a zigzag across the axis and the bars,
    and a note saying so."""
    y0, y1 = ax.get_ylim()
    y = y0 + 0.06 * (y1 - y0)
    kw = dict(transform=ax.get_yaxis_transform(), clip_on=False, color=INK, lw=1.0)
    for dx in (-0.012, 0.0):
        ax.plot([dx - 0.01, dx + 0.01], [y - 0.015 * (y1 - y0), y + 0.015 * (y1 - y0)], **kw)
    for i in range(n_bars):  # a white gap through every bar at the break
        ax.fill_between([i - 0.35, i + 0.35], y - 0.012 * (y1 - y0), y + 0.012 * (y1 - y0),
                        color="white", zorder=3)
    ax.text(0.99, 0.98, f"axis broken: starts at {y0:,.0f} kWh, not at zero",
            transform=ax.transAxes, fontsize=7, color=LOSS, va="top", ha="right")
    ax.yaxis.set_major_formatter(lambda v, _: f"{v:,.0f}")


# a soiling recovery's cause: line colour and legend words (no rain readings: unknown)
RECOVERY = {"rain": ("#3d5a80", "after rain"), "cleaning": (LOSS, "after cleaning"),
            "unknown": (INK, "of unknown cause (no rain readings)")}


def fig_soiling(aligned: pd.DataFrame, tz: str, events: list[dict]) -> Figure:
    """Daily performance index (measured/expected) with rain and the recoveries found."""
    fig, (ax,) = _figure()
    _title(ax, "Soiling profile: daily performance index, rain and recoveries")
    d = daily_energy(aligned, tz) if len(aligned) else pd.DataFrame()
    if d.empty or not (d["expected_kwh"] > 0).any():
        _note(ax, "no daily data in this period")
        return fig
    pi = d["measured_kwh"] / d["expected_kwh"].where(d["expected_kwh"] > 0)
    ax.plot(pi.index, pi, "o", ms=3, color=MEASURED, alpha=0.7, label="daily index")
    lo, hi = pi.quantile(0.02), pi.quantile(0.98)  # outliers (outage days) may leave the frame
    if np.isfinite(lo) and np.isfinite(hi):
        ax.set_ylim(lo - 0.4 * (hi - lo) - 0.01, hi + 0.4 * (hi - lo) + 0.01)
    ax.plot(pi.index, pi.rolling(7, center=True, min_periods=3).median(), color=INK, lw=1.3,
            label="7-day median")
    shown: set[str] = set()  # legend entries drawn once
    first, last = pi.index.min(), pi.index.max() + pd.Timedelta(days=1)
    for ev in events:
        if ev.get("kind") != "soiling":
            continue
        s, e = (pd.Timestamp(ev[k]).tz_convert(tz).tz_localize(None) for k in ("start", "end"))
        s, e = max(s, first), min(e, last)
        ax.axvspan(s, e, color=kinds.colour("soiling"), alpha=0.12,
                   label=None if "band" in shown else "soiling found")
        shown.add("band")
        for rec in ev.get("recoveries", []):  # {"at": local date, "cause": RECOVERY key}
            t = pd.Timestamp(rec["at"])
            if not first <= t <= last:  # a recovery outside the period is not drawn
                continue
            cause = rec.get("cause") if rec.get("cause") in RECOVERY else "rain"
            colour, words = RECOVERY[cause]
            ax.axvline(t, color=colour, lw=1.2, ls="--",
                       label=None if cause in shown else f"recovery {words}")
            shown.add(cause)
    ax.set_ylabel("measured / expected [-]", fontsize=8)
    rain = d["rain_mm"]
    if rain.notna().any():
        ax2 = ax.twinx()
        ax2.bar(rain.index, rain.fillna(0), width=0.8, color="#3d5a80", alpha=0.3)
        ax2.set_ylabel("rain [mm/day]", fontsize=8, color="#3d5a80")
        ax2.tick_params(labelsize=8, colors="#3d5a80")
        ax2.spines["top"].set_visible(False)
    else:
        ax.text(0.99, 0.02, "no rain gauge in the logger files", transform=ax.transAxes,
                ha="right", fontsize=7, color=MUTED)
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, fontsize=7, frameon=False, loc="outside lower center",
               ncols=len(labels))
    ax.set_xlim(first - pd.Timedelta(days=1), last)
    fig.autofmt_xdate()
    return fig


def shading_bins(aligned: pd.DataFrame, slices: int = 4) -> tuple[list[str], list[pd.DataFrame]]:
    """Median relative loss 1 - measured/expected by sun azimuth and elevation, per time slice.

    Only rows with the sun up and a clear sky (GHI at least 70 % of clear-sky GHI) count, so the
    loss is dominated by beam obstruction. Bins are 10 degrees of azimuth by 5 of elevation.
    """
    ok = (aligned["sun_zenith_deg"] < 85) & (aligned["expected_ac_w"] > 0) & (
        aligned["ghi_wm2"] >= 0.7 * aligned["clearsky_ghi_wm2"])
    df = aligned.loc[ok, ["ts", "sun_azimuth_deg", "sun_zenith_deg"]].copy()
    df["loss"] = (1 - aligned.loc[ok, "measured_ac_w"] / aligned.loc[ok, "expected_ac_w"]).clip(
        -0.5, 1.0)
    if df.empty:
        return [], []
    df["az"] = (df["sun_azimuth_deg"] // 10) * 10
    df["el"] = ((90 - df["sun_zenith_deg"]) // 5) * 5
    edges = pd.date_range(df["ts"].min(), df["ts"].max(), periods=slices + 1)
    labels, grids = [], []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        part = df[(df["ts"] >= a) & (df["ts"] <= b)]
        labels.append(f"{a:%d %b %Y} to {b:%d %b %Y}")
        grids.append(part.pivot_table(index="el", columns="az", values="loss", aggfunc="median"))
    return labels, grids


# A time slice of the sky map needs about a month of clear intervals to fill its bins
# (common practice); a shorter period gets one map of where, not of when.
SLICE_DAYS = 30
MAX_SLICES = 4


def sky_slices(aligned: pd.DataFrame) -> int:
    """How many time slices of at least ``SLICE_DAYS`` days the period holds (1 to 4)."""
    if not len(aligned):
        return 1
    days = (aligned["ts"].max() - aligned["ts"].min()).total_seconds() / 86400
    return int(max(1, min(MAX_SLICES, days // SLICE_DAYS)))


def fig_shading_map(aligned: pd.DataFrame) -> Figure:
    """Sun-position map (azimuth, elevation) of the relative loss, in up to four time slices
    of at least ``SLICE_DAYS`` days."""
    n = sky_slices(aligned)
    # panels and a colour bar they share: matplotlib's constrained layout places them
    fig, axes = _figure(height=3.4, ncols=n, layout="constrained")
    fig.suptitle("Loss by sun position over time (clear-sky intervals)" if n > 1 else
                 "Loss by sun position (clear-sky intervals; the period is too short for time "
                 "slices)", x=0.01, ha="left", fontsize=10, fontweight="bold", color=INK)
    labels, grids = shading_bins(aligned, n) if len(aligned) else ([], [])
    if not grids:
        for ax in axes:
            _note(ax, "no clear-sky data")
        return fig
    mesh = None
    az_lo = min(g.columns.min() for g in grids if not g.empty)
    az_hi = max(g.columns.max() for g in grids if not g.empty) + 10
    el_hi = max(g.index.max() for g in grids if not g.empty) + 5
    values = np.concatenate([g.to_numpy(float).ravel() for g in grids])
    vmax = max(0.05, float(np.nanpercentile(values, 95))) if np.isfinite(values).any() else 0.5
    for ax, label, g in zip(axes, labels, grids, strict=False):
        ax.grid(False)
        if g.empty:
            _note(ax, "no data")
            continue
        mesh = ax.pcolormesh(np.r_[g.columns, g.columns[-1] + 10], np.r_[g.index, g.index[-1] + 5],
                             g.to_numpy(float), cmap="YlOrBr", vmin=0, vmax=vmax, shading="flat")
        ax.set_title(label, fontsize=7, color=INK)
        ax.set_xlabel("azimuth [deg]", fontsize=7)
        ax.set_xlim(az_lo, az_hi)
        ax.set_ylim(0, el_hi)
    axes[0].set_ylabel("sun elevation [deg]", fontsize=8)
    if mesh is not None:
        cb = fig.colorbar(mesh, ax=axes, shrink=0.85)
        cb.set_label("loss 1 - measured/expected [-]", fontsize=7)
        cb.ax.tick_params(labelsize=7)
    return fig


def fig_limits_by_hour(aligned: pd.DataFrame, tz: str) -> Figure:
    """Energy the ledger holds for clipping at the AC rating and for curtailment events, by
    local hour (the ledger's ``clipping_wh`` and ``curtailment_wh``, so its bars sum to the
    losses table's figures)."""
    fig, (ax,) = _figure()
    _title(ax, "Clipping and curtailment by hour of day")
    if not len(aligned) or "clipping_wh" not in aligned:
        _note(ax, "no analysed data in this period")
        return fig
    hour = aligned["ts"].dt.tz_convert(tz).dt.hour
    by = (aligned[["clipping_wh", "curtailment_wh"]].div(1000.0).assign(hour=hour)
          .groupby("hour").sum().reindex(range(24), fill_value=0.0))
    ax.bar(by.index, by["clipping_wh"], color=kinds.colour("design_clipping"),
           label=kinds.words("design_clipping"))
    ax.bar(by.index, by["curtailment_wh"], bottom=by["clipping_wh"],
           color=kinds.colour("curtailment"), label="curtailment (found events)")
    ax.set_xticks(range(0, 24, 2))
    ax.set_xlabel("local hour [h]", fontsize=8)
    ax.set_ylabel("energy [kWh]", fontsize=8)
    ax.legend(fontsize=8, frameon=False, loc="upper left")
    if not by.to_numpy().sum() > 0:
        _note(ax, "no clipping or curtailment in this period")
    return fig


def sibling_ratio(aligned: pd.DataFrame, tz: str) -> pd.DataFrame:
    """Each inverter's daily measured/expected divided by the median of the others' [-]."""
    df = pd.DataFrame({
        "day": local_days(aligned, tz), "inv": aligned["inverter_id"],
        "m": energy_kwh(aligned["measured_ac_w"], aligned["interval_s"]),
        "e": energy_kwh(aligned["expected_ac_w"], aligned["interval_s"]),
    })
    daily = df.groupby(["day", "inv"])[["m", "e"]].sum(min_count=1)
    pi = (daily["m"] / daily["e"].where(daily["e"] > 0)).unstack("inv")
    out = {}
    for inv in pi.columns:
        others = pi.drop(columns=inv)
        out[inv] = pi[inv] / others.median(axis=1) if others.shape[1] else pi[inv]
    return pd.DataFrame(out)


def fig_sibling_ratio(aligned: pd.DataFrame, tz: str) -> Figure:
    """Inverter-against-siblings ratio per day: a drop on one line points at that inverter."""
    fig, ax, r = _daily_panel("Each inverter against its siblings (daily)", sibling_ratio,
                              aligned, tz)
    if r.empty:
        return fig
    for i, inv in enumerate(r.columns):
        ax.plot(r.index, r[inv], lw=1.2, color=FLAG_COLOURS[i % len(FLAG_COLOURS)], label=inv)
    ax.axhline(1.0, color=INK, lw=0.8, ls=":")
    ax.set_ylabel("ratio to median of the others [-]", fontsize=8)
    ax.legend(fontsize=8, framealpha=0.9, edgecolor=GRID, ncols=min(len(r.columns), 6),
              loc="best")
    if r.shape[1] < 2:
        _note(ax, "one inverter only: nothing to compare with")
    fig.autofmt_xdate()
    return fig


def fig_power_scatter(aligned: pd.DataFrame, max_points: int = 20000) -> Figure:
    """Measured against expected power per interval, coloured by quality flag."""
    fig, (ax,) = _figure(height=4.2)
    _title(ax, "Measured against expected power, by quality flag")
    df = aligned[(aligned["expected_ac_w"] > 0) | (aligned["measured_ac_w"] > 0)]
    if df.empty:
        _note(ax, "no daylight data in this period")
        return fig
    if len(df) > max_points:
        df = df.sample(max_points, random_state=1)
    # the first flag of each distinct flag list, then per row (a few lists, many rows)
    codes, lists = pd.factorize(df["flags"].fillna("").astype(str))
    firsts = np.array([f.split(",")[0] or "no flag" for f in lists], dtype=object)
    flag = pd.Series(firsts[codes], index=df.index, dtype=object)
    top = max(df["expected_ac_w"].max(), df["measured_ac_w"].max()) / 1e3
    order = ["no flag"] + sorted(set(flag) - {"no flag"})
    invs = sorted(df["inverter_id"].unique())
    for j, inv in enumerate(invs):
        for i, name in enumerate(order):
            sel = (flag == name) & (df["inverter_id"] == inv)
            if sel.any():
                ax.scatter(df.loc[sel, "expected_ac_w"] / 1e3,
                           df.loc[sel, "measured_ac_w"] / 1e3, marker=MARKERS[j % len(MARKERS)],
                           s=4 if name == "no flag" else 8,
                           alpha=0.35 if name == "no flag" else 0.8,
                           color=FLAG_COLOURS[i % len(FLAG_COLOURS)], rasterized=True,
                           linewidths=0)
    ax.plot([0, top], [0, top], color=INK, lw=1.2, ls="--", zorder=10, label="measured = "
            "expected")
    flags = [Line2D([], [], ls="", marker="o", color=FLAG_COLOURS[i % len(FLAG_COLOURS)],
                    label=f"{name.replace('_', ' ')} ({(flag == name).sum()})")
             for i, name in enumerate(order) if (flag == name).any()]
    markers = [Line2D([], [], ls="", marker=MARKERS[j % len(MARKERS)], color=MUTED,
                      label=f"inverter {inv}") for j, inv in enumerate(invs)]
    first = ax.legend(handles=[*flags, Line2D([], [], color=INK, ls="--",
                                              label="measured = expected")],
                      title="quality flag", title_fontsize=7, fontsize=7, framealpha=0.9,
                      edgecolor=GRID, loc="upper left")
    ax.add_artist(first)
    ax.legend(handles=markers, title="inverter", title_fontsize=7, fontsize=7, framealpha=0.9,
              edgecolor=GRID, loc="lower right")
    ax.set_xlabel("expected AC power [kW]", fontsize=8)
    ax.set_ylabel("measured AC power [kW]", fontsize=8)
    return fig


# (file stem, caption) for each figure, in report order; the builder gets (aligned, result, tz).
FIGURES: list[tuple[str, str, Callable]] = [
    ("daily_energy", "Daily measured against expected energy for the plant (weekly beyond 120 "
     "days); the shaded gap is the shortfall.", lambda a, r, tz: fig_daily_energy(a, tz)),
    ("monthly_pr", "Monthly PR, temperature-corrected PR and EPI with their intervals (day-block "
     "bootstrap plus irradiance-sensor uncertainty).",
     lambda a, r, tz: fig_monthly_pr(r["metrics"]["monthly"])),
    ("loss_attribution", "From expected to measured energy: energy lost to each cause found, in "
     "the order of attribution, and what no cause explains; the axis is broken (marked) so "
     "that small losses show.",
     lambda a, r, tz: fig_loss_attribution(r.get("losses", {}))),
    ("soiling", "Daily measured/expected index with rain (bars), the soiling the detector found "
     "(shaded band) and its recoveries (dashed: blue after rain, red after a cleaning, dark "
     "where no rain readings tell the cause).",
     lambda a, r, tz: fig_soiling(a, tz, r.get("events", []))),
    ("shading_map", "Median relative loss on clear-sky intervals by sun azimuth and elevation, "
     "in up to four time slices of at least 30 days (one map for a shorter period): a patch "
     "that darkens from slice to slice is an obstruction growing.",
     lambda a, r, tz: fig_shading_map(a)),
    ("limits_by_hour", "Energy kept at the inverters' AC rating (clipping, by design, not a "
     "loss) and held back by the curtailment events found, by local hour: the same energies as "
     "the losses table.",
     lambda a, r, tz: fig_limits_by_hour(a, tz)),
    ("sibling_ratio", "Each inverter's daily measured/expected divided by the median of the "
     "others: a lasting drop on one line points at that inverter.",
     lambda a, r, tz: fig_sibling_ratio(a, tz)),
    ("power_scatter", "Measured against expected AC power per interval, coloured by the first "
     "quality flag of the readings behind it, one marker per inverter; the dashed line is "
     "measured = expected.",
     lambda a, r, tz: fig_power_scatter(a)),
]



PAD_IN = 3 / 72  # space around the panel's decorations and the figure's legends [in]


def _place(fig: Figure) -> None:
    """Place a one-panel figure's axes (the panel and its twin, if any) so that their
    decorations (tick labels, axis labels, title, legends) fit the figure with ``PAD_IN``
    around them, above the figure legends at its lower edge.

    The margins are those of matplotlib's constrained layout with its default padding, but
    measured once: constrained layout measures every decoration twice before the figure is
    drawn, in case the new axes size changed the ticks. The measuring pass here sees the axes
    at about their final size already (``NEAR_PLACE``), so their ticks are the ones drawn.
    """
    renderer = fig.canvas.get_renderer()
    to_in = fig.dpi_scale_trans.inverted()
    width, height = fig.get_size_inches()
    axes = fig.axes
    box = axes[0].get_position().transformed(fig.transFigure).transformed(to_in)
    tight = Bbox.union([ax.get_tightbbox(renderer, for_layout_only=True)
                        for ax in axes]).transformed(to_in)
    below = sum(leg.get_tightbbox(renderer).transformed(to_in).height + 2 * PAD_IN
                for leg in fig.legends)
    x0 = PAD_IN + box.x0 - tight.x0
    x1 = width - PAD_IN - (tight.x1 - box.x1)
    y0 = below + PAD_IN + box.y0 - tight.y0
    y1 = height - PAD_IN - (tight.y1 - box.y1)
    for ax in axes:
        ax.set_position([x0 / width, y0 / height, (x1 - x0) / width, (y1 - y0) / height])


def pixels(fig: Figure) -> np.ndarray:
    """The figure's pixels at ``DPI`` (8-bit RGB, rows from the top): what its PNG
    (:func:`png`) holds and what the PDF embeds.

    The canvas is drawn once (the layout engine runs inside that draw; ``savefig`` would first
    draw the whole figure with the drawing switched off only to run it). The paper is opaque,
    so the alpha channel is 255 everywhere and is left out.
    """
    if fig.get_layout_engine() is None:
        _place(fig)
    fig.canvas.draw()
    return np.ascontiguousarray(np.asarray(fig.canvas.buffer_rgba())[:, :, :3])


def png(rgb: np.ndarray) -> bytes:
    """PNG bytes of a figure's pixels (:func:`pixels`), RGB only: a quarter less to compress
    than RGBA, the same picture. zlib's level 3 instead of its default 6 takes about a third
    less time for some ten percent more bytes. Pillow compresses without the interpreter's
    lock, so a second thread can encode one figure while the next is drawn.
    """
    buf = io.BytesIO()
    Image.fromarray(rgb).save(buf, format="png", compress_level=3, dpi=(DPI, DPI))
    return buf.getvalue()


def _num(v: object) -> float:
    return float("nan") if v is None else float(v)
