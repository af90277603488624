"""The demo site file: the complete, commented example of every key perfcheck reads."""

from __future__ import annotations

import datetime as dt

MAIN_LOGGER = "fl3"
WEATHER_LOGGER = "ws2"
POA_INVERTER = "inv1"  # the POA pyranometer and the module sensor sit on this inverter's array
TRACKER_INVERTER = "inv4"  # its rows sit on single-axis trackers; the main logger logs their angle
# The trackers' stow limit (invented design value; trackers commonly stow at mean wind speeds
# in the upper teens of m/s, common practice, from memory): the controller lays the rows flat
# for every block of intervals whose mean wind speed, as the weather station logs it
# (10-minute means), reaches it.
STOW_WIND_SPEED_MS = 17.0
# AC cabling and transformer between the inverters and the export meter [%] (invented, within
# the 1-2.5 % common practice puts them at): the meter register counts the inverters' output
# less this share, and the site file states the same design value.
METER_AC_LOSS_PCT = 1.0

SITE_TEMPLATE = """\
# Site file of the invented demo plant "Solarpark Talbrunn" (no such plant exists; the data in
# this folder are written by perfcheck.scenario). Every key that perfcheck reads is shown here.
# Units are in the key names; "default" says what happens when a key is left out.

[site]
name = "Solarpark Talbrunn"          # free text, shown in reports (required)
latitude_deg = 48.262                # degrees north, -90..90 (required)
longitude_deg = 15.874               # degrees east, -180..180 (required)
altitude_m = 238.0                   # above sea level [m] (default 0)
timezone = "Europe/Vienna"           # IANA zone: day and month boundaries, local logger clocks
commissioned = {commissioned:<22}# date of commissioning, reference for ageing (required)
export_limit_kw = 175.0              # plant export limit at the grid point [kW] (default: none)
albedo = 0.20                        # ground reflectance 0..1, default for every array (0.2)
# inbox = "incoming/*.csv"           # glob of newly arrived logger files, relative to this
#                                    # file's folder, for the monthly job (default: none)
# Horizon seen from the plant, [azimuth_deg, elevation_deg] pairs, azimuth clockwise from
# north; linear between points, wraps at 360. Default for every array (default: flat, 0 deg).
horizon = [
  [0.0, 2.0], [45.0, 3.0], [80.0, 5.5], [100.0, 7.0], [120.0, 5.0], [150.0, 2.5],
  [180.0, 1.5], [210.0, 2.0], [240.0, 3.0], [270.0, 2.5], [300.0, 2.0], [330.0, 2.0],
]

# One [[inverters]] table per inverter, each with one or more [[inverters.arrays]].
[[inverters]]
id = "inv1"                          # unique id used in logger mappings and reports (required)
ac_kw = 50.0                         # AC rating, the clipping limit [kW] (required)
efficiency_pct = 98.0                # nominal (weighted) efficiency [%] (default 96)
night_tare_w = 0.0                   # power drawn at night [W] (default 0)

  [[inverters.arrays]]
  dc_kwp = 66.0                      # DC nameplate at STC [kWp] (required)
  tilt_deg = 25.0                    # from horizontal, 0..90 [deg] (required)
  azimuth_deg = 180.0                # clockwise from north, 180 = south [deg] (required)
  gamma_pct_per_c = -0.35            # temperature coefficient of Pmax [%/C] (required)
  mounting = "open_rack"             # open_rack | close_roof | insulated_back (open_rack)
  construction = "glass_polymer"     # glass_polymer | glass_glass (glass_polymer)
  strings = 6                        # number of parallel strings (required)
  # albedo = 0.20                    # overrides [site].albedo for this array
  # horizon = [[0.0, 0.0]]           # overrides [site].horizon for this array

[[inverters]]
id = "inv2"
ac_kw = 40.0
efficiency_pct = 98.0
night_tare_w = 0.0

  [[inverters.arrays]]
  dc_kwp = 44.0
  tilt_deg = 15.0
  azimuth_deg = 95.0                 # east
  gamma_pct_per_c = -0.35
  mounting = "open_rack"
  construction = "glass_polymer"
  strings = 4

[[inverters]]
id = "inv3"
ac_kw = 40.0
efficiency_pct = 98.0
night_tare_w = 0.0

  [[inverters.arrays]]
  dc_kwp = 33.0
  tilt_deg = 15.0
  azimuth_deg = 265.0                # west
  gamma_pct_per_c = -0.35
  mounting = "open_rack"
  construction = "glass_polymer"
  strings = 3

  [[inverters.arrays]]
  dc_kwp = 11.0
  tilt_deg = 20.0
  azimuth_deg = 225.0                # south-west
  gamma_pct_per_c = -0.35
  mounting = "open_rack"
  construction = "glass_polymer"
  strings = 1

# A block on horizontal single-axis trackers (north-south axis) with bifacial modules. Its
# plane turns, so it has no tilt_deg or azimuth_deg; the rows are flat at night.
[[inverters]]
id = "inv4"
ac_kw = 50.0
efficiency_pct = 98.0
night_tare_w = 0.0

  [[inverters.arrays]]
  dc_kwp = 48.0
  gamma_pct_per_c = -0.30
  mounting = "open_rack"
  construction = "glass_glass"       # bifacial modules: glass on both faces
  strings = 4
  tracking = "single_axis"           # fixed | single_axis (fixed)
  axis_tilt_deg = 0.0                # tilt of the axis, 0..45 [deg] (0)
  axis_azimuth_deg = 180.0           # the axis points north-south [deg] (180)
  max_angle_deg = 55.0               # largest rotation either way from flat [deg] (60)
  backtrack = true                   # turn back at low sun against row shading (true)
  stow_wind_speed_ms = {stow_ms:<15}# the rows lie at their stow angle at or above this
  #                                  # wind speed, as the wind column logs it [m/s] (inferred)
  stow_angle_deg = 0.0               # rotation in stow [deg] (0: flat)
  gcr = 0.4                          # module length across the row over the row pitch
  bifaciality = 0.70                 # rear over front efficiency (default: monofacial)
  row_height_m = 1.6                 # height of the row's centre above the ground [m]
  row_pitch_m = 5.5                  # distance between rows [m]

# Design losses in percent, combined multiplicatively (defaults in brackets).
[losses]
wiring_pct = 1.5                     # DC wiring (2.0)
mismatch_pct = 1.0                   # module and string mismatch (2.0)
nameplate_pct = 0.5                  # nameplate tolerance (1.0)
lid_pct = 1.5                        # light-induced degradation (1.5)
other_pct = 0.5                      # anything else (0.0)
degradation_pct_per_year = 0.5       # assumed ageing since commissioning [%/year] (0.5)

# Choices for the expected series.
[model]
irradiance_source = "auto"           # auto | poa_sensor | ghi (auto: the POA sensor where valid)
poa_sensor_kind = "pyranometer"      # pyranometer | reference_cell (pyranometer)
poa_sensor_tilt_deg = 25.0           # plane of the POA sensor (default: first array's plane)
poa_sensor_azimuth_deg = 180.0       # clockwise from north (default: first array's azimuth)
decomposition = "erbs"               # GHI to DNI/DHI: disc | erbs | boland (disc)
transposition = "perez"              # perez | haydavies | isotropic (perez)
temperature_model = "sapm"           # sapm | faiman (sapm)
iam = "physical"                     # physical | ashrae | martin_ruiz | none (physical)
sensor_class = "A"                   # IEC 61724-1 monitoring class A | B | C (A)
# poa_uncertainty_pct = 1.5          # POA uncertainty [%] (default: from sensor_class)

# Sections read by later stages ([metrics], [detect], [guarantees], [report], [meter]) are
# optional and described in the README.

# The export meter: the plant's yields and PR are taken where the energy is delivered
# (IEC 61724-1), at the logger column mapped with inverter = "plant" (E_Netz below); the
# per-inverter figures stay at the inverters. Optional.
[meter]
ac_loss_pct = {ac_loss_pct:<23}# AC cabling and transformer, inverters to meter [%] (0)
# basis = "auto"                     # auto | meter | inverters (auto: the meter when mapped)

# Filtering rules of the performance metrics (optional; all shown with their defaults).
[metrics]
# min_poa_wm2 = 0.0                  # irradiance floor for yields, PR and EPI [W/m2]
# availability_min_poa_wm2 = 50.0    # intervals above it count for availability [W/m2]
# availability_down_below_pct = 1.0  # an inverter below this share of expected is down [%]
# exclude_flags = ["out_of_range", "stuck", "gap", "night_offset", "power_without_irradiance"]
min_coverage = 0.8                   # least share of daylight intervals with data (0.8)
exclude_curtailment = true           # curtailment events left out of PR, EPI, availability
# exclude_grid_outages = false       # plant-wide stops left out likewise (false)
# sensor_fault_fallback = true       # modelled irradiance inside sensor-fault events (true)
# pr_temp_ref_c = 25.0               # T_ref of the temperature-corrected PR, or "annual"
# t_cell_typ_avg_c = 30.0            # for the weather-corrected PR (default: from the data)
# bootstrap_samples = 1000           # day-block bootstrap resamples (1000)
# confidence = 0.95                  # level of every interval (0.95)
# seed = 61724                       # bootstrap seed: reruns give identical numbers
# modelled_poa_uncertainty_pct = 5.0 # uncertainty of modelled irradiance [%] (5)

# Settings of the detectors (optional; all shown with their defaults).
[detect]
# reference_from = 2024-05-01        # start of the baseline's reference window (commissioned)
# reference_days = 28                # length of the reference window, at least 7 [days]
# alpha = 0.001                      # false-alarm level of each change-point test
# cusum_k = 0.5                      # CUSUM allowance, in standard deviations
# cusum_h = 5.5                      # CUSUM decision limit, in standard deviations
# soiling_rain_mm = 5.0              # daily rain that washes the modules [mm]
# clock_min_offset_min = 20.0        # smallest clock offset reported [min]
# shading_min_deficit = 0.05         # smallest beam loss of a sky region that counts [-]

# What was promised (optional). perfcheck check and the evidence bundle test each promise
# one-sided against the measured value and its interval; a shortfall inside the interval is
# "not shown", never a breach. The findings are evidence, not legal advice.
[guarantees]
confidence = 0.95                    # level of the one-sided tests (0.95)
price_per_kwh = 0.09                 # price of a kWh short, in currency (default: no price)
currency = "EUR"                     # ("")

  # O&M performance guarantee (invented contract)
  [guarantees.performance]
  metric = "pr_temp_corrected"       # pr_temp_corrected | epi | pr | pr_weather_corrected
  yearly = [0.82, 0.815]             # guaranteed value per contract year; the last repeats
  availability = 0.98                # guaranteed availability 0..1 (default: none)
  availability_basis = "time"        # time | energy (time)
  # start = 2024-05-01               # start of contract year 1 (default: commissioned)

  # Module power warranty: the warranted power curve
  [guarantees.module_warranty]
  first_year_loss_pct = 2.0          # largest loss in the first year [%]
  yearly_loss_pct = 0.55             # largest loss each year after [%/year]
  # start = 2024-05-01               # (default: commissioned)

# The monthly job (optional; defaults in brackets).
[report]
underperformance_threshold_pct = 5.0 # exit 1 when EPI < 1 - this/100 (5)
critical_kinds = ["outage"]          # event kinds that make the job exit 3 (["outage"])
lock_wait_s = 300                    # a second run waits this long for the first [s] (300)
# out_dir = "reports"                # dated report folders, relative to this file ("reports")

# Main logger (invented "Ferrantel FL-3"): one file per month, ';' with decimal comma, three
# preamble lines, a units row, naive local time (summer time: the October hour appears twice,
# the March hour is missing), labels at the END of each {interval}-minute interval, CRLF, UTF-8 BOM.
[[loggers]]
name = "fl3"                         # unique name (required)
match = "talbrunn_fl3_*.csv"         # file-name glob that selects this logger ("*")
delimiter = ";"                      # , ; \\t | (",")
decimal = ","                        # "." or "," (".")
preamble_lines = 3                   # lines before the header row (0)
units_row = true                     # a units row follows the header (false)
interval_min = {interval:<22}# 1, 5, 10, 15, 30 or 60 (required)
sentinels = ["-9999", "#N/A"]        # values meaning "no reading" ([])

  [loggers.time]
  columns = ["Zeit"]                 # one column, or [date, time] columns (required)
  kind = "local"                     # iso (with offset) | utc | local | epoch (required)
  format = "%d.%m.%Y %H:%M"          # strptime format for utc/local ("%Y-%m-%d %H:%M:%S")
  label = "end"                      # the row's time is the interval's start | end ("start")

  [[loggers.columns]]
  name = "P_WR1"                     # header text in the file (required)
  # quantity (required): ac_power, dc_power [W kW MW]; energy_register, energy_interval
  # [Wh kWh MWh]; poa, ghi, dhi, dni [W/m2]; temp_air, temp_module [C K];
  # wind_speed [m/s km/h]; rain [mm per interval]
  quantity = "ac_power"
  unit = "kW"                        # unit as written (required)
  inverter = "inv1"                  # device quantities: inverter id or "plant" ("plant")

  [[loggers.columns]]
  name = "P_WR2"
  quantity = "ac_power"
  unit = "kW"
  inverter = "inv2"

  [[loggers.columns]]
  name = "P_WR3"
  quantity = "ac_power"
  unit = "kW"
  inverter = "inv3"

  [[loggers.columns]]
  name = "P_WR4"
  quantity = "ac_power"
  unit = "kW"
  inverter = "inv4"

  [[loggers.columns]]
  name = "E_Netz"
  quantity = "energy_register"       # cumulative meter reading
  unit = "kWh"
  inverter = "plant"
  # rollover = 1000000.0             # register wraps at this value, in the column's unit

  [[loggers.columns]]
  name = "G_Modul"
  quantity = "poa"
  unit = "W/m2"

  [[loggers.columns]]
  name = "T_Modul"
  quantity = "temp_module"
  unit = "C"

  # The inclinometer of inv4's tracker rows: their rotation from flat, positive toward the
  # west (the analysis reads it as the rows of the first tracker array)
  [[loggers.columns]]
  name = "Winkel_NF4"
  quantity = "tracker_angle"
  unit = "deg"

# Weather station (invented "Nubila WS-2"): ',' with decimal point, ISO 8601 with offset,
# {ws_interval}-minute means (rain: sum) labelled at the START of the interval, LF line ends;
# global and diffuse horizontal irradiance, air temperature, wind, rain.
[[loggers]]
name = "ws2"
match = "talbrunn_ws2_*.csv"
delimiter = ","
decimal = "."
preamble_lines = 0
units_row = false
interval_min = {ws_interval}
sentinels = ["NaN"]

  [loggers.time]
  columns = ["time"]
  kind = "iso"
  label = "start"

  [[loggers.columns]]
  name = "ghi"
  quantity = "ghi"
  unit = "W/m2"

  [[loggers.columns]]
  name = "tamb"
  quantity = "temp_air"
  unit = "C"

  [[loggers.columns]]
  name = "wind"
  quantity = "wind_speed"
  unit = "m/s"

  [[loggers.columns]]
  name = "rain"
  quantity = "rain"
  unit = "mm"

  # Diffuse horizontal irradiance from a second pyranometer of the same class, shaded from the
  # sun disc by a ball on a sun tracker. With GHI and DHI both measured the model splits
  # nothing: DNI follows from GHI = DNI cos(zenith) + DHI, and a decomposition model (see
  # [model] decomposition) only fills intervals where DHI is missing.
  [[loggers.columns]]
  name = "dhi"
  quantity = "dhi"
  unit = "W/m2"
"""


def weather_factor(interval_min: int) -> int:
    """The weather station averages this many logger intervals (10-minute means if it can)."""
    return 10 // interval_min if 10 % interval_min == 0 else 1


def site_text(start: dt.date, interval_min: int = 5) -> str:
    """The demo site file for a plant commissioned on ``start``."""
    return SITE_TEMPLATE.format(commissioned=start.isoformat(), interval=interval_min,
                                ac_loss_pct=METER_AC_LOSS_PCT, stow_ms=STOW_WIND_SPEED_MS,
                                ws_interval=interval_min * weather_factor(interval_min))
