-- Store one file's outcome (run inside the file's transaction). Statements are separated by
-- lines holding only ';' and run in order. <unions> is the long form of the readable rows of
-- _ingest_rows; <value_columns> the logger table's columns c<channel_id> in mapping order,
-- <values> the matching v1, v2 ..., <null_dups> "c<id> = CASE WHEN list_contains(d.dup, <id>)
-- THEN NULL ELSE t.c<id> END" per channel (integers only).
INSERT INTO quarantine
SELECT $file_id, o.line, t.ts, l.raw, o.reason
FROM _ingest_outcome o
JOIN _ingest_rows l USING (line)
ASOF LEFT JOIN (SELECT line, ts FROM _ingest_rows WHERE ts IS NOT NULL) t ON o.line >= t.line
WHERE o.outcome = 'quarantined'
ORDER BY o.line
;
INSERT INTO conflicts
SELECT d.ts, c.quantity, c.device, d.stored_value, d.value, d.stored_file_id, d.stored_line,
       $file_id, d.line
FROM _ingest_match d JOIN channels c USING (channel_id)
WHERE d.status = 'conflict'
;
INSERT INTO conflicts
WITH long AS ({unions}),
repeats AS (
    SELECT line, first_line FROM _ingest_outcome
    WHERE outcome = 'quarantined' AND first_line IS NOT NULL
)
SELECT n.ts, c.quantity, c.device, f.value, n.value, $file_id, r.first_line, $file_id, r.line
FROM repeats r
JOIN long n ON n.line = r.line
LEFT JOIN long f ON f.line = r.first_line AND f.channel_id = n.channel_id
JOIN channels c ON c.channel_id = n.channel_id
WHERE f.value IS DISTINCT FROM n.value
;
UPDATE _ingest_rows SET loaded = false WHERE line IN (SELECT line FROM _ingest_outcome)
;
INSERT INTO logger_rows_{logger_id} (ts, file_id, line, {value_columns})
SELECT ts, $file_id, line, {values}
FROM _ingest_rows
WHERE loaded
;
-- a loaded line may hold some values that are stored already: keep only the new ones
UPDATE logger_rows_{logger_id} AS t SET {null_dups}
FROM (SELECT line, list(channel_id) AS dup FROM _ingest_match WHERE status = 'dup'
      GROUP BY line) d
WHERE t.file_id = $file_id AND t.line = d.line
