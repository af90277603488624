"""Clipping: measured power held at the inverter's AC limit while the unlimited expected power
is above it.

Per inverter, the limit actually held is estimated from the data: the median measured power
over the intervals where the unlimited model exceeds the rating by more than the interval
noise. An interval is clipped when the unlimited expected power is above that limit and the
measured power sits within the plateau tolerance of it. The energy is the unlimited expected
power minus the limit, summed. With the limit at the rating this is the natural clipping of a
high DC/AC ratio: a design fact, reported as its own kind ``design_clipping``; the expected
series already stops at the rating, so its energy is kept beside the losses, never among them.
A limit clearly below the rating (beyond the tolerance) is a derated inverter (kind
``clipping``): then the shortfall of those intervals is attributed to clipping.

References
----------
Perry, Muller & Anderson 2021, "Performance comparison of clipping detection techniques in AC
power time series", IEEE PVSC 48 (NREL/CP-5K00-78954): plateau detection on AC power; the
threshold form used here is common practice.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perfcheck.detect.common import Event, Wide, energy_band, scope_of

METHOD = ("plateau at the inverter's AC limit while unlimited expected power exceeds it "
          "(in the spirit of Perry, Muller & Anderson 2021)")


def detect(w: Wide, rel_sigma: float, step_noise: float, exclude: pd.DataFrame
           ) -> tuple[list[Event], pd.DataFrame, dict[int, pd.DataFrame]]:
    """Clipping events (one per inverter with clipping), the mask of clipped intervals, and
    per design event (by ``id``) the unlimited expected power above the rating [W].

    Parameters
    ----------
    rel_sigma : relative standard error of expected energy [-]
    step_noise : interval noise of measured/expected [-]
    exclude : intervals already explained (outages), left out
    """
    tol = max(3 * step_noise, 0.005)
    mask = pd.DataFrame(False, index=w.index, columns=w.inverters)
    events: list[Event] = []
    design: dict[int, pd.DataFrame] = {}
    step = w.interval_s.to_numpy()
    for inv in w.inverters:
        rating = float(w.ac_w[inv])
        m = w.measured[inv].to_numpy()
        pot = w.potential[inv].to_numpy()
        keep = ~exclude[inv].to_numpy() & np.isfinite(m)
        over = keep & (pot > rating * (1 + tol)) & (m > 0.5 * rating)
        if over.sum() < 3:
            continue
        limit = float(np.median(m[over]))
        clipped = keep & (pot > limit) & (np.abs(m - limit) <= tol * limit)
        n = int(clipped.sum())
        if n < 3:
            continue
        mask[inv] = clipped
        # energy above the limit wherever the inverter was working (an interval only partly
        # clipped still loses its part above the limit)
        over_lim = keep & (pot > limit) & (m > 0.5 * limit)
        e_kwh = float(np.sum((pot[over_lim] - limit) * step[over_lim]) / 3.6e6)
        pot_kwh = float(np.sum(pot[over_lim] * step[over_lim]) / 3.6e6)
        low, high = energy_band(e_kwh, 0.0, rel_sigma * pot_kwh)
        derated = limit < rating * (1 - tol)
        gap = w.expected[inv].to_numpy() - m
        gap_kwh = float(np.nansum(gap[clipped] * step[clipped]) / 3.6e6)
        pos = np.flatnonzero(clipped)
        days = w.day.to_numpy()[clipped]
        ev = Event(
            kind="clipping" if derated else "design_clipping", scope=scope_of(inv),
            start=w.index[pos[0]],
            end=w.index[pos[-1]] + pd.Timedelta(seconds=float(step[pos[-1]])),
            energy_loss_kwh=e_kwh, energy_loss_kwh_low=max(low, 0.0), energy_loss_kwh_high=high,
            method=METHOD,
            evidence={"limit_w": limit, "rating_w": rating, "tolerance": tol,
                      "clipped_intervals": n, "clipped_hours": float(step[clipped].sum() / 3600),
                      "days_with_clipping": int(len(np.unique(days)))},
            detail={"shortfall_kwh": gap_kwh},
        )
        events.append(ev)
        if not derated:
            above = np.where(over_lim, pot - limit, 0.0)
            design[id(ev)] = pd.DataFrame({inv: above}, index=w.index)
    return events, mask, design
