-- Metrics stage: every stored metric value carries the run that made it, and the run carries
-- the filtering rules and settings used (as JSON), so a number is never separated from its rules.
CREATE SEQUENCE IF NOT EXISTS metrics_run_id START 1;

CREATE TABLE IF NOT EXISTS metrics_runs (
    run_id        INTEGER PRIMARY KEY,
    created_at    TIMESTAMPTZ NOT NULL,
    period_start  TIMESTAMPTZ NOT NULL,
    period_end    TIMESTAMPTZ NOT NULL,   -- exclusive
    settings_json VARCHAR NOT NULL,
    tool_version  VARCHAR NOT NULL
);

-- Long format: one row per (run, level, period, scope, metric). level is 'day', 'month', 'year'
-- or 'period'; scope is 'plant' or 'inverter:<id>'. value is NULL where too little data was
-- valid, with the reason.
CREATE TABLE IF NOT EXISTS metrics_values (
    run_id        INTEGER NOT NULL,
    level         VARCHAR NOT NULL,
    period_start  TIMESTAMPTZ NOT NULL,
    period_end    TIMESTAMPTZ NOT NULL,
    scope         VARCHAR NOT NULL,
    metric        VARCHAR NOT NULL,
    value         DOUBLE,
    ci_low        DOUBLE,
    ci_high       DOUBLE,
    reason        VARCHAR
);
