-- Model and align stages: the expected series, the runs that made it, the sun, and the
-- aligned measured-vs-expected table. All instants UTC, labelling the start of the interval.
CREATE SEQUENCE IF NOT EXISTS model_run_seq START 1;

-- One row per set of model parameters (hash of their canonical JSON). last_file_id: the newest
-- source file when the model last ran with these parameters.
CREATE TABLE IF NOT EXISTS model_runs (
    model_run_id    INTEGER PRIMARY KEY,
    params_hash     VARCHAR NOT NULL UNIQUE,
    parameters_json VARCHAR NOT NULL,
    versions_json   VARCHAR NOT NULL,
    created_at      TIMESTAMPTZ NOT NULL,
    updated_at      TIMESTAMPTZ NOT NULL,
    last_file_id    INTEGER NOT NULL DEFAULT 0,
    checks_json     VARCHAR                -- plausibility of the POA sensor against the model
);

-- The expected series had a table of its own (expected), copied into aligned_base, before
-- MODEL_VERSION 10, whose runs are not reused: the model now writes its rows there directly.
DROP TABLE IF EXISTS expected;
DROP TABLE IF EXISTS model_conditions;

-- Measured and expected side by side, one row per (interval, inverter), for one model run: the
-- model writes its expected rows here beside the measured power (perfcheck.align.store).
CREATE TABLE IF NOT EXISTS aligned_base (
    ts               TIMESTAMPTZ NOT NULL,
    inverter_id      VARCHAR NOT NULL,
    interval_s       INTEGER NOT NULL,
    measured_ac_w    DOUBLE,
    expected_ac_w    DOUBLE,  -- with AC rating (clipping) and plant export limit
    potential_ac_w   DOUBLE,  -- without AC rating and export limit
    expected_dc_w    DOUBLE,
    poa_wm2          DOUBLE,  -- irradiance in the inverter's plane(s) used (DC-weighted)
    poa_modelled_wm2 DOUBLE,  -- modelled from GHI (or from the sensor's components)
    poa_source       VARCHAR, -- 'sensor', 'translated' (carried from it) or 'model'
    ghi_wm2          DOUBLE,
    clearsky_ghi_wm2 DOUBLE,
    temp_air_c       DOUBLE,
    wind_speed_ms    DOUBLE,
    temp_module_c    DOUBLE,
    temp_cell_c      DOUBLE,
    rain_mm          DOUBLE,
    sun_zenith_deg   DOUBLE,  -- apparent (refracted), at the interval's mid-point
    sun_azimuth_deg  DOUBLE,  -- clockwise from north
    model_run_id     INTEGER NOT NULL
);
ALTER TABLE aligned_base ADD COLUMN IF NOT EXISTS temp_cell_modelled_c DOUBLE;
ALTER TABLE aligned_base ADD COLUMN IF NOT EXISTS expected_ac_modelled_w DOUBLE;
ALTER TABLE aligned_base ADD COLUMN IF NOT EXISTS potential_ac_modelled_w DOUBLE;
ALTER TABLE aligned_base ADD COLUMN IF NOT EXISTS poa_dni_sensitivity_wm2 DOUBLE;
ALTER TABLE aligned_base ADD COLUMN IF NOT EXISTS poa_beam_range_wm2 DOUBLE;
ALTER TABLE aligned_base ADD COLUMN IF NOT EXISTS poa_sensor_wm2 DOUBLE;

-- Which model run and which source files aligned_base reflects (one row).
CREATE TABLE IF NOT EXISTS align_state (
    model_run_id INTEGER NOT NULL,
    last_file_id INTEGER NOT NULL
);

-- The aligned rows with the quality flags of the readings behind them (the inverter's own and
-- the site weather), comma-separated, '' if none. flags is the quality stage's table
-- (schema_20_quality.sql, created before this file).
CREATE OR REPLACE VIEW aligned AS
WITH fl AS (
    SELECT to_timestamp(floor(epoch(f.ts) / s.interval_s) * s.interval_s) AS ts,
           f.device, f.flag
    FROM flags f, (SELECT max(interval_s) AS interval_s FROM aligned_base) s
), fa AS (
    SELECT a.ts, a.inverter_id, string_agg(DISTINCT fl.flag, ',' ORDER BY fl.flag) AS flags
    FROM aligned_base a JOIN fl ON fl.ts = a.ts AND fl.device IN (a.inverter_id, 'site')
    GROUP BY a.ts, a.inverter_id
)
SELECT a.ts, a.inverter_id, a.interval_s, a.measured_ac_w, a.expected_ac_w, a.potential_ac_w,
       a.expected_dc_w, a.poa_wm2, a.poa_modelled_wm2, a.poa_source, a.ghi_wm2,
       a.clearsky_ghi_wm2, a.temp_air_c, a.wind_speed_ms, a.temp_module_c, a.temp_cell_c,
       a.rain_mm, a.sun_zenith_deg, a.sun_azimuth_deg, coalesce(fa.flags, '') AS flags,
       a.expected_ac_modelled_w, a.potential_ac_modelled_w, a.temp_cell_modelled_c,
       a.poa_dni_sensitivity_wm2, a.poa_beam_range_wm2, a.poa_sensor_wm2
FROM aligned_base a LEFT JOIN fa USING (ts, inverter_id);
