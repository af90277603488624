-- Detect stage: every finding of perfcheck.detect, one row per event. Instants are UTC;
-- period_start/period_end are the bounds of the run that found it (end exclusive), so a rerun
-- over the same period replaces its events.
CREATE TABLE IF NOT EXISTS events (
    period_start         TIMESTAMPTZ NOT NULL,
    period_end           TIMESTAMPTZ NOT NULL,
    seq                  INTEGER NOT NULL,     -- position in the run's events[]
    kind                 VARCHAR NOT NULL,     -- outage, partial_outage, clipping, ...
    scope                VARCHAR NOT NULL,     -- 'plant' or 'inverter:<id>'
    start_ts             TIMESTAMPTZ NOT NULL, -- first interval start
    end_ts               TIMESTAMPTZ NOT NULL, -- end of the last interval (exclusive)
    energy_loss_kwh      DOUBLE,
    energy_loss_kwh_low  DOUBLE,
    energy_loss_kwh_high DOUBLE,
    method               VARCHAR NOT NULL,
    evidence_json        VARCHAR NOT NULL,     -- the statistic behind the finding
    detail_json          VARCHAR NOT NULL,     -- kind-specific fields (strings lost, ...)
    created_at           TIMESTAMPTZ NOT NULL
);
