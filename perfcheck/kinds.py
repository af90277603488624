"""The one table of event kinds: what each finding is called, how it is shown, and how the loss
ledger and the metrics treat it. Attribution, report, figures, the monthly job and the JSON
Schema all read it, so a new kind is added here once.

Ledger classes (see :mod:`perfcheck.detect.attribution` for the order):

- ``correction``: a fault of the data, not of the plant. The readings (clock) or the reference
  (irradiance sensor) are corrected before anything is summed; the event costs no energy.
- ``interval``: each interval it covers (outage, clipping below the rating, curtailment),
  one cause per interval, counted against the inverter's local level (what it delivered of
  its expected power in the weeks around).
- ``share``: a share of the expected power of the intervals it covers, applied one after
  another to what the causes before it left (degradation beyond the ageing allowance, soiling,
  shading, lost strings).
- ``residual``: what the detectors leave in a period the baseline test flags.
- ``design``: inside the expected series by design (clipping at the AC rating, a tracker's
  wind stow); shown with its energy, never counted as a loss.

Metrics treatment: ``exclude`` (left out of yields, PR, EPI and availability when the
``[metrics]`` setting named in ``metrics_setting`` is on), ``model_poa`` (reference yield and
expected power from the modelled irradiance, setting ``sensor_fault_fallback``), or ``none``.
``downtime``: the intervals an event of this kind takes are the inverter's downtime in the
availability.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Kind:
    name: str  # the code value in JSON and CSV
    words: str  # what a person reads
    colour: str  # figures and tables
    ledger: str  # correction | interval | share | residual | design
    metrics: str  # exclude | model_poa | none
    metrics_setting: str | None  # the [metrics] key that switches the treatment
    why: str  # why the data point at it (completes "we think so because ...")
    check: str  # what to check on site (completes "on site, check ...")
    downtime: bool = False  # its intervals are the inverter's downtime in the availability


TABLE: tuple[Kind, ...] = (
    Kind("clock_fault", "logger clock fault", "#5f9ea0", "correction", "none", None,
         "the daily centre of the measured power, and its span of production, moved by the "
         "same offset on every day of the window, against the sun's position or against the "
         "irradiance another logger recorded",
         "the logger's clock, its time zone and daylight-saving setting"),
    Kind("sensor_fault", "irradiance sensor fault", "#c27c9e", "correction", "model_poa",
         "sensor_fault_fallback",
         "the irradiance sensor disagreed with the clear-sky model and with what all inverters "
         "together produced", "the sensor's level, cleanliness, wiring and calibration date"),
    Kind("outage", "outage", "#7b2d26", "interval", "exclude", "exclude_grid_outages",
         "output stayed at or near zero while there was irradiance and the other inverters "
         "produced", "the inverter's fault log and display, AC and DC isolators, fuses and the "
         "grid-protection relay", downtime=True),
    Kind("clipping", "clipping below the AC rating", "#d9a441", "interval", "none", None,
         "the power sat on a plateau below the inverter's AC rating while the unlimited model "
         "was above it", "the inverter's power-limit setting and its derating alarms"),
    Kind("curtailment", "curtailment", "#8f7ab8", "interval", "exclude", "exclude_curtailment",
         "the output sat on a plateau below the nameplate, shared by the inverters at the same "
         "time or at the export limit", "the grid operator's curtailment records and the plant "
         "controller's set-points"),
    Kind("degradation", "degradation beyond the ageing allowance", "#6b8f71", "share", "none",
         None, "the clear-day performance index fell from one year to the next by more than the "
         "design's ageing allowance", "a sample of modules with an I-V curve tracer against the "
         "warranty"),
    Kind("soiling", "soiling", "#8c6d46", "share", "none", None,
         "the daily performance index declined gradually and recovered after rain or a "
         "detected step up", "the module surfaces, and whether a cleaning would pay for itself "
         "at the rate found"),
    Kind("shading", "shading", "#3d5a80", "share", "none", None,
         "the loss concentrates at particular sun positions and grew over the months",
         "vegetation or new structures in the direction given, and the horizon profile in the "
         "site file"),
    Kind("tracker_stall", "tracker stalled", "#a0522d", "share", "none", None,
         "the day's power followed the shape of a plane held at one angle, not that of the "
         "tracked plane", "the tracker drive, its controller, inclinometer and power supply, "
         "and any mechanical block of the rows"),
    Kind("tracker_out_of_step", "tracker rows out of step", "#cd853f", "share", "none", None,
         "the rows turned, but by a constant offset from the designed angle, unlike their "
         "neighbours", "the row controller's angle set-point, its inclinometer calibration and "
         "its clock"),
    Kind("partial_outage", "partial outage", "#b5553c", "share", "none", None,
         "the output stepped down against both its expected output and its sibling inverters "
         "and stayed down, the pattern of strings or an MPP input dropping out",
         "string currents, string fuses and connectors, and the inverter's input-side alarms"),
    Kind("underperformance", "unexplained underperformance", "#9a9a9a", "residual", "none", None,
         "the output was significantly below the baseline regression and no detector could "
         "explain it", "the inverter and array in that window: alarms, string currents, "
         "visible damage or shading"),
    Kind("design_clipping", "clipping at the AC rating (by design)", "#e6c88a", "design", "none",
         None, "the power sat on a plateau at the inverter's AC rating while the unlimited model "
         "was above it; with the site's DC/AC ratio this is expected by design",
         "nothing: the expected series already stops at the rating"),
    Kind("wind_stow", "wind stow (by design)", "#9bb7d4", "design", "none", None,
         "the rows lay at their stow angle while the wind was above the stow limit, as the "
         "tracker is designed to do", "nothing, unless stow lasted longer than the wind: then "
         "the controller's stow limit and its anemometer"),
)

BY_NAME: dict[str, Kind] = {k.name: k for k in TABLE}
NAMES: tuple[str, ...] = tuple(BY_NAME)
# Causes of loss in the order the ledger takes them (corrections and design carry no loss).
LOSS_ORDER: tuple[str, ...] = tuple(k.name for k in TABLE
                                    if k.ledger in ("interval", "share", "residual"))
UNEXPLAINED_COLOUR = "#cfcac0"


def get(name: str) -> Kind:
    """The kind called ``name``; KeyError names the known ones."""
    try:
        return BY_NAME[name]
    except KeyError:
        raise KeyError(f"{name!r} is not an event kind ({', '.join(NAMES)})") from None


def is_loss(name: str) -> bool:
    """Whether events of this kind are losses against the expected series."""
    return BY_NAME[name].ledger in ("interval", "share", "residual")


def words(name: str) -> str:
    return BY_NAME[name].words if name in BY_NAME else name.replace("_", " ")


def colour(name: str) -> str:
    return BY_NAME[name].colour if name in BY_NAME else UNEXPLAINED_COLOUR
