-- Ingest stage: files, readings, quarantine, conflicts. All instants are UTC and label the
-- start of the logger interval. Values are in SI units, named with their unit suffix.
CREATE SEQUENCE IF NOT EXISTS source_file_id START 1;

CREATE TABLE IF NOT EXISTS source_files (
    file_id        INTEGER PRIMARY KEY,
    path           VARCHAR NOT NULL,      -- as given on the command line
    logger         VARCHAR NOT NULL,      -- [[loggers]] name used to read it
    sha256         VARCHAR NOT NULL,
    size_bytes     BIGINT NOT NULL,
    rows_read      BIGINT NOT NULL,
    rows_loaded    BIGINT NOT NULL,
    rows_duplicate BIGINT NOT NULL,
    rows_quarantined BIGINT NOT NULL,
    first_ts       TIMESTAMPTZ,
    last_ts        TIMESTAMPTZ,
    ingested_at    TIMESTAMPTZ NOT NULL,
    tool_version   VARCHAR NOT NULL
);

-- One row per (instant, quantity, device). quantity is the stored name with its unit
-- (ac_power_w, poa_wm2 ...); device is an inverter id, 'plant' or 'site'.
CREATE TABLE IF NOT EXISTS readings (
    ts        TIMESTAMPTZ NOT NULL,
    quantity  VARCHAR NOT NULL,
    device    VARCHAR NOT NULL,
    value     DOUBLE,
    file_id   INTEGER NOT NULL,
    line      BIGINT NOT NULL
);

CREATE TABLE IF NOT EXISTS quarantine (
    file_id   INTEGER NOT NULL,
    line      BIGINT NOT NULL,
    raw       VARCHAR,
    reason    VARCHAR NOT NULL
);

CREATE TABLE IF NOT EXISTS conflicts (
    ts            TIMESTAMPTZ NOT NULL,
    quantity      VARCHAR NOT NULL,
    device        VARCHAR NOT NULL,
    stored_value  DOUBLE,
    new_value     DOUBLE,
    stored_file_id INTEGER NOT NULL,
    new_file_id   INTEGER NOT NULL,
    new_line      BIGINT NOT NULL
);
