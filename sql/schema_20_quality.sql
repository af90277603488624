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
