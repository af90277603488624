-- Quality stage: flags stored beside the readings; a flag never deletes a reading.
-- flag is one of out_of_range, stuck, gap, night_offset, power_without_irradiance; ts is the
-- reading's instant (for gap: the first missing interval; detail says how many are missing).
CREATE TABLE IF NOT EXISTS flags (
    ts       TIMESTAMPTZ NOT NULL,
    quantity VARCHAR NOT NULL,
    device   VARCHAR NOT NULL,
    flag     VARCHAR NOT NULL,
    detail   VARCHAR
);

-- The newest ingested file whose readings the flags were computed with, written in the same
-- transaction as the flags: a run killed before its commit leaves it behind source_files, so
-- the next ingest (or model) run sees the flags are stale and recomputes them.
CREATE TABLE IF NOT EXISTS quality_state (
    last_file_id INTEGER
);

-- The unit check (perfcheck/units.py), recomputed with the flags. unit_findings: a file's column
-- whose level sits a clean factor off its neighbours ("suspected unit error"), with the factor
-- that would bring it to them, the reference it was compared with and the figures. Its readings
-- are left out (unit_adjust) until a [[corrections]] entry of the site file settles it.
CREATE TABLE IF NOT EXISTS unit_findings (
    file_id     INTEGER NOT NULL,
    column_name VARCHAR NOT NULL,
    quantity    VARCHAR NOT NULL,
    device      VARCHAR NOT NULL,
    factor      DOUBLE NOT NULL,
    reference   VARCHAR NOT NULL,
    detail      VARCHAR NOT NULL
);

-- The site file's [[corrections]] as applied, per file and channel (provenance): the factor the
-- stored values are multiplied by, and the reason the site file gives.
CREATE TABLE IF NOT EXISTS unit_corrections (
    file_id     INTEGER NOT NULL,
    column_name VARCHAR NOT NULL,
    quantity    VARCHAR NOT NULL,
    device      VARCHAR NOT NULL,
    factor      DOUBLE NOT NULL,
    rule        VARCHAR NOT NULL,      -- corrections[i] with its files glob
    reason      VARCHAR NOT NULL
);

-- The digest of the site file's [[corrections]] the unit check last ran with.
CREATE TABLE IF NOT EXISTS unit_state (
    corrections_sha256 VARCHAR
);
