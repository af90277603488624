-- Analysis stage: the plant's whole history analysed once (perfcheck.analysis). Every view
-- (check, report, monthly, evidence, capacity) reads these tables and clips them to its window.
-- An analysis is identified by the hash of its inputs (the logger files, the aligned series,
-- the site file, the versions); only the current one keeps its ledger and daily sums, earlier
-- ones keep their events so that revisions can be shown.
CREATE SEQUENCE IF NOT EXISTS analysis_id START 1;

CREATE TABLE IF NOT EXISTS analyses (
    analysis_id    INTEGER PRIMARY KEY,
    input_hash     VARCHAR NOT NULL,
    inputs_json    VARCHAR NOT NULL,      -- what the hash covers, readable
    created_at     TIMESTAMPTZ NOT NULL,
    first_ts       TIMESTAMPTZ NOT NULL,  -- the history analysed, [first_ts, end_ts)
    end_ts         TIMESTAMPTZ NOT NULL,
    settings_json  VARCHAR NOT NULL,      -- metrics settings used, with T_cell_typ_avg
    model_json     VARCHAR NOT NULL,      -- model error, baseline fits
    degradation_json VARCHAR NOT NULL,    -- the degradation block
    is_current     BOOLEAN NOT NULL
);

-- Every finding of the whole history. Energies are the ledger's sums over the whole event;
-- a view restates them over its window from analysis_entries.
CREATE TABLE IF NOT EXISTS analysis_events (
    analysis_id          INTEGER NOT NULL,
    event_id             INTEGER NOT NULL,
    kind                 VARCHAR NOT NULL,     -- perfcheck.kinds
    scope                VARCHAR NOT NULL,     -- 'plant' or 'inverter:<id>'
    start_ts             TIMESTAMPTZ NOT NULL, -- first interval start
    end_ts               TIMESTAMPTZ NOT NULL, -- end of the last interval (exclusive)
    energy_kwh           DOUBLE NOT NULL,
    energy_kwh_low       DOUBLE NOT NULL,
    energy_kwh_high      DOUBLE NOT NULL,
    method               VARCHAR NOT NULL,
    evidence_json        VARCHAR NOT NULL,
    detail_json          VARCHAR NOT NULL
);

-- The loss ledger, one row per interval and inverter with a measured or an expected value:
-- expected energy (design at its ageing allowance, irradiance-sensor faults rebuilt from
-- modelled irradiance), measured energy (clock faults shifted back), and the unexplained rest
-- (expected - measured - the losses of analysis_entries), NULL where either is missing, and
-- the plane-of-array irradiance the expected power was built from (clock faults shifted back).
CREATE TABLE IF NOT EXISTS ledger (
    analysis_id     INTEGER NOT NULL,
    ts              TIMESTAMPTZ NOT NULL,
    inverter_id     VARCHAR NOT NULL,
    interval_s      DOUBLE NOT NULL,
    measured_wh     DOUBLE,
    expected_wh     DOUBLE,
    unexplained_wh  DOUBLE,
    poa_wm2         DOUBLE              -- plane-of-array irradiance as corrected [W/m2]
);

-- What each event takes from each interval [Wh] (for design events, what they keep out of the
-- expected series). Sparse: only intervals an event touches.
CREATE TABLE IF NOT EXISTS analysis_entries (
    analysis_id  INTEGER NOT NULL,
    event_id     INTEGER NOT NULL,
    ts           TIMESTAMPTZ NOT NULL,
    inverter_id  VARCHAR NOT NULL,
    energy_wh    DOUBLE NOT NULL
);

-- Additive daily sums per inverter behind every metric (perfcheck.metrics.SUM_COLUMNS before
-- scaling), computed once over the whole history.
CREATE TABLE IF NOT EXISTS analysis_daily (
    analysis_id  INTEGER NOT NULL,
    day          DATE NOT NULL,
    inverter_id  VARCHAR NOT NULL,
    interval_s        DOUBLE NOT NULL,
    n_daylight        DOUBLE NOT NULL,
    n_valid           DOUBLE NOT NULL,
    n_excluded        DOUBLE NOT NULL,
    n_used            DOUBLE NOT NULL,
    n_fallback        DOUBLE NOT NULL,
    n_dc              DOUBLE NOT NULL,
    e_meas_wh         DOUBLE NOT NULL,
    e_exp_wh          DOUBLE NOT NULL,
    e_exp_fallback_wh DOUBLE NOT NULL,
    e_dc_wh           DOUBLE NOT NULL,
    h_whm2            DOUBLE NOT NULL,
    h_sensor_whm2     DOUBLE NOT NULL,
    h_t_whm2          DOUBLE NOT NULL,
    ht_whm2c          DOUBLE NOT NULL,
    h_tb_whm2         DOUBLE,
    htb_whm2c         DOUBLE,
    n_base            DOUBLE NOT NULL,
    n_up              DOUBLE NOT NULL,
    e_base_exp_wh     DOUBLE NOT NULL,
    e_down_exp_wh     DOUBLE NOT NULL,
    e_meas_all_wh     DOUBLE NOT NULL,
    e_exp_all_wh      DOUBLE NOT NULL,
    e_exp_gap_wh      DOUBLE NOT NULL,
    e_ledger_meas_wh  DOUBLE NOT NULL,
    e_ledger_exp_wh   DOUBLE NOT NULL,
    n_nominal         DOUBLE NOT NULL
);

-- Databases made before the temperature basis of the corrected PR get its sums (NULL in the
-- analyses stored before; the next analysis fills them).
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS h_tb_whm2 DOUBLE;
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS htb_whm2c DOUBLE;

-- The export meter (perfcheck.meter): its energy shared over the ledger's rows (by measured
-- energy; by expected energy for an inverter without data, a register step across a gap spread
-- in the shape of the expected power); NULL without a meter or where it has no energy.
ALTER TABLE ledger ADD COLUMN IF NOT EXISTS delivered_wh DOUBLE;
-- true where that energy comes from a meter step over several intervals, spread in the shape of
-- the expected power (a logger gap, a meter read less often than the inverters)
ALTER TABLE ledger ADD COLUMN IF NOT EXISTS delivered_shaped BOOLEAN DEFAULT false;
-- The daily sums twice when the plant is judged at the meter: basis 'inverter' (the inverters'
-- energy) and 'meter' (the meter's energy, expected power less the design AC loss, behind the
-- plant's yields and PR); e_delivered_wh and the reconciliation sums (e_rec_*: the inverters'
-- and the meter's energy over the rows with both) in the 'inverter' rows.
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS basis VARCHAR DEFAULT 'inverter';
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS e_delivered_wh DOUBLE DEFAULT 0;
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS e_rec_inv_wh DOUBLE DEFAULT 0;
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS e_rec_meter_wh DOUBLE DEFAULT 0;
-- The modelled irradiance's sensitivity to the decomposition's DNI, summed like h_whm2 over the
-- used rows without the sensor's reading [Wh/m2] (aligned_base.poa_dni_sensitivity_wm2; 0 in the
-- analyses stored before it).
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS h_dni_whm2 DOUBLE DEFAULT 0;
-- The modelled irradiance's range over the beam cut at low sun, summed the same way [Wh/m2]
-- (aligned_base.poa_beam_range_wm2; 0 in the analyses stored before it).
ALTER TABLE analysis_daily ADD COLUMN IF NOT EXISTS h_beam_whm2 DOUBLE DEFAULT 0;

-- Which earlier findings a new analysis changed, and why.
CREATE TABLE IF NOT EXISTS analysis_revisions (
    analysis_id   INTEGER NOT NULL,
    previous_id   INTEGER NOT NULL,
    change        VARCHAR NOT NULL,   -- 'found earlier', 'changed', 'withdrawn'
    kind          VARCHAR NOT NULL,
    scope         VARCHAR NOT NULL,
    before_start  TIMESTAMPTZ,
    before_end    TIMESTAMPTZ,
    before_kwh    DOUBLE,
    after_start   TIMESTAMPTZ,
    after_end     TIMESTAMPTZ,
    after_kwh     DOUBLE,
    reason        VARCHAR NOT NULL,
    created_at    TIMESTAMPTZ NOT NULL
);
