-- Report stage: what the monthly job ran and one history row per site and month.
CREATE SEQUENCE IF NOT EXISTS run_id START 1;

-- One row per run of a reporting command (monthly, report, evidence), with its outcome.
CREATE TABLE IF NOT EXISTS runs (
    run_id       INTEGER PRIMARY KEY,
    command      VARCHAR NOT NULL,      -- the exact command line
    started_at   TIMESTAMPTZ NOT NULL,
    finished_at  TIMESTAMPTZ,
    exit_code    INTEGER,
    files_new    INTEGER,               -- logger files ingested by this run
    out_dir      VARCHAR,
    tool_version VARCHAR NOT NULL
);

-- One row per (site, month): re-running a month replaces its row, never adds a second one.
CREATE TABLE IF NOT EXISTS history (
    site            VARCHAR NOT NULL,
    month           VARCHAR NOT NULL,   -- YYYY-MM in the site's time zone
    measured_kwh    DOUBLE,
    expected_kwh    DOUBLE,
    epi             DOUBLE,
    epi_low         DOUBLE,
    epi_high        DOUBLE,
    pr              DOUBLE,
    pr_temp_corrected DOUBLE,
    availability    DOUBLE,
    coverage        DOUBLE,
    top_events      VARCHAR,            -- up to three, "kind scope kWh" separated by "; "
    status          VARCHAR NOT NULL,   -- healthy, underperformance, critical
    exit_code       INTEGER NOT NULL,
    run_id          INTEGER,
    PRIMARY KEY (site, month)
);
