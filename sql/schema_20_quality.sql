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
