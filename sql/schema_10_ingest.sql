-- Ingest stage: files, readings, quarantine, conflicts. All instants are UTC and label the
-- start of the logger interval. Values are in SI units, named with their unit suffix.
CREATE SEQUENCE IF NOT EXISTS source_file_id START 1;

-- One row per logger file ingested. rows_read = rows_loaded + rows_duplicate + rows_quarantined
-- (blank lines, the header, the units row and preamble lines are not rows).
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
    conflicts      BIGINT NOT NULL,       -- values that differ from a stored value (table conflicts)
    first_ts       TIMESTAMPTZ,
    last_ts        TIMESTAMPTZ,
    ingested_at    TIMESTAMPTZ NOT NULL,
    tool_version   VARCHAR NOT NULL
);

-- The bytes of every ingested file version, zlib-compressed, keyed by their sha256 and stored in
-- the same transaction as the file: a logger file that later grows or changes under the same
-- name (a month exported on the 15th and again on the 1st) keeps its earlier version here, so
-- evidence bundles still carry the exact bytes that were ingested.
CREATE TABLE IF NOT EXISTS source_copies (
    sha256     VARCHAR PRIMARY KEY,
    zlib_bytes BLOB NOT NULL
);

-- The status codes loggers wrote (quantity status: text or integers, as written, trimmed); a
-- status reading's value is the code_id of its code here. The site file's states tables say
-- what each code means, so a mapping can be changed without ingesting again.
CREATE TABLE IF NOT EXISTS status_texts (
    code_id INTEGER PRIMARY KEY,
    code    VARCHAR NOT NULL UNIQUE
);

-- A channel is one (quantity, device) pair: quantity is the stored name with its unit
-- (ac_power_w, poa_wm2 ...); device is an inverter id, 'plant' or 'site'.
CREATE TABLE IF NOT EXISTS channels (
    channel_id SMALLINT PRIMARY KEY,
    quantity   VARCHAR NOT NULL,
    device     VARCHAR NOT NULL,
    UNIQUE (quantity, device)
);

-- Values are stored as the loggers write them: one wide table per logger, logger_rows_<id>
-- (ts, file_id, line, c<channel_id> ...), a row per loaded line, NULL where a value is missing
-- or was stored already. Created and widened by the ingest (sql/ingest_logger_table.sql), no
-- index: only ever appended to and scanned. Later stages read the long views below.
CREATE TABLE IF NOT EXISTS loggers (
    logger_id SMALLINT PRIMARY KEY,
    name      VARCHAR NOT NULL UNIQUE       -- [[loggers]] name in the site file
);

CREATE TABLE IF NOT EXISTS logger_channels (
    logger_id  SMALLINT NOT NULL,
    channel_id SMALLINT NOT NULL,
    PRIMARY KEY (logger_id, channel_id)
);

-- Each logger's interval [min], as its files were read (the site file's interval_min at the
-- latest ingest): later stages read it here, not from the site file.
ALTER TABLE loggers ADD COLUMN IF NOT EXISTS interval_min SMALLINT;

-- The logging interval [min] of each (quantity, device): the shortest of the loggers that
-- carry it.
CREATE OR REPLACE VIEW channel_intervals AS
SELECT c.quantity, c.device, min(l.interval_min) AS interval_min
FROM logger_channels lc
JOIN loggers l USING (logger_id)
JOIN channels c USING (channel_id)
WHERE l.interval_min IS NOT NULL
GROUP BY c.quantity, c.device;

-- Long rows written directly (by tests' fixtures or an importer that has no logger file); the
-- ingest itself writes the logger tables. Part of channel_values.
CREATE TABLE IF NOT EXISTS reading_values (
    ts         TIMESTAMPTZ NOT NULL,
    channel_id SMALLINT NOT NULL,
    value      DOUBLE NOT NULL,
    file_id    INTEGER NOT NULL,
    line       INTEGER NOT NULL
);

-- One row per (instant, channel) with a value: reading_values and the logger tables unpivoted.
-- Rebuilt by the ingest (sql/ingest_view.sql) whenever a logger or channel is added.
CREATE VIEW IF NOT EXISTS channel_values AS
SELECT ts, channel_id, value, file_id, line FROM reading_values;

-- Per (file, channel), what the quality stage's unit check decided (perfcheck/units.py): the
-- values are multiplied by factor (a [[corrections]] entry of the site file), or left out while
-- factor is NULL (a suspected unit error the site file has not settled). Rebuilt by units.run,
-- which also redefines the macro unit_factor(file_id, channel_id) from it (a CASE over its
-- rows: 1 for every other pair), so that readings costs no join.
CREATE TABLE IF NOT EXISTS unit_adjust (
    file_id    INTEGER NOT NULL,
    channel_id SMALLINT NOT NULL,
    factor     DOUBLE
);
CREATE MACRO IF NOT EXISTS unit_factor(file_id, channel_id) AS 1.0::DOUBLE;

-- Values of a report-by-exception historian carried forward on its interval grid (a value
-- holds until the next one of its point, up to the logger's carry_forward_min), each with the
-- file and line it was read from. Derived, never compared at ingest; rebuilt by the quality
-- stage (sql/quality_carry.sql).
CREATE TABLE IF NOT EXISTS carried_values (
    ts         TIMESTAMPTZ NOT NULL,
    channel_id SMALLINT NOT NULL,
    value      DOUBLE NOT NULL,
    file_id    INTEGER NOT NULL,
    line       INTEGER NOT NULL
);

-- What later stages read: one row per (instant, quantity, device), carried values included and
-- unit corrections applied; channel_id names (quantity, device) as a small integer, for
-- joins and sorts over whole tables.
CREATE OR REPLACE VIEW readings AS
SELECT v.ts, c.quantity, c.device, v.value * unit_factor(v.file_id, v.channel_id) AS value,
       v.file_id, v.line, v.channel_id
FROM (SELECT ts, channel_id, value, file_id, line FROM channel_values
      UNION ALL
      SELECT ts, channel_id, value, file_id, line FROM carried_values) v
JOIN channels c USING (channel_id)
WHERE unit_factor(v.file_id, v.channel_id) IS NOT NULL;

-- Input rows that were not loaded, with their raw text and why. ts is the line's own instant
-- where it could be read, else that of the nearest readable line before it in the file (for
-- coverage counts by month; NULL when no line before it is readable).
CREATE TABLE IF NOT EXISTS quarantine (
    file_id   INTEGER NOT NULL,
    line      BIGINT NOT NULL,
    ts        TIMESTAMPTZ,
    raw       VARCHAR,
    reason    VARCHAR NOT NULL
);

-- Values that disagree with a value stored for the same instant and channel (from an earlier
-- file, or from an earlier line of the same file). The stored value is kept; the row that
-- brought the new value is quarantined.
CREATE TABLE IF NOT EXISTS conflicts (
    ts            TIMESTAMPTZ NOT NULL,
    quantity      VARCHAR NOT NULL,
    device        VARCHAR NOT NULL,
    stored_value  DOUBLE,
    new_value     DOUBLE,
    stored_file_id INTEGER NOT NULL,
    stored_line   BIGINT NOT NULL,
    new_file_id   INTEGER NOT NULL,
    new_line      BIGINT NOT NULL
);

-- A wall-clock time read with a strptime format, else with the spaces around it trimmed. '24:00',
-- which loggers that label the end of an interval write for the end of a day, is read as 00:00
-- of the next day. (Each fallback is evaluated only where the reading before it failed; trim(t)
-- is written once, as DuckDB would otherwise compute a repeated trim(t) for every row first.)
CREATE OR REPLACE MACRO wall_clock(t, fmt) AS
    coalesce(try_strptime(t, fmt),
             try_strptime(trim(t), fmt),
             CASE WHEN contains(t, '24:00')
                  THEN try_strptime(trim(replace(t, '24:00', '00:00')), fmt) + INTERVAL 1 DAY
             END);
