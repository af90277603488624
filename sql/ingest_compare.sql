-- The values of the readable lines that meet a value already stored for the same instant and
-- channel. status: 'dup' (equal within 1e-9 relative, so a kW export and a W export of the same
-- data agree) or 'conflict'. Values with no stored counterpart are new and are not listed.
CREATE OR REPLACE TEMP TABLE _ingest_match AS
WITH long AS (
    {unions}
),
stored AS (
    SELECT ts, channel_id, value, file_id, line
    FROM channel_values
    WHERE ts BETWEEN $lo AND $hi AND list_contains($channels, channel_id)
)
SELECT n.line, n.ts, n.channel_id, n.value,
       s.value AS stored_value, s.file_id AS stored_file_id, s.line AS stored_line,
       CASE WHEN n.value = s.value
                 OR abs(n.value - s.value) <= 1e-9 * greatest(abs(n.value), abs(s.value))
            THEN 'dup'
            ELSE 'conflict' END AS status
FROM long n
JOIN stored s ON s.ts = n.ts AND s.channel_id = n.channel_id;
