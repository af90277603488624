-- The input lines that are not loaded, each once, as 'quarantined' or 'duplicate' (every other
-- line of _ingest_rows is loaded):
--  * a line that cannot be read: quarantined with its reason;
--  * a line with a value that differs from a stored one: quarantined, the values go to conflicts;
--  * a line repeating the time of an earlier line of the same file (in a tall file: the time
--    and device, <key> "ts, dev"; else "ts"): duplicate when every value is the same (missing
--    counts as a value here), else quarantined as a conflict;
--  * any other line: duplicate when it has values and all of them are stored already, else it
--    is loaded (a line whose every field is empty or a sentinel is loaded and stores nothing).
CREATE OR REPLACE TEMP TABLE _ingest_outcome AS
WITH stored_conflict AS (
    SELECT line, count(*) AS n, min(stored_file_id) AS file_id, min(stored_line) AS stored_line
    FROM _ingest_match WHERE status = 'conflict' GROUP BY line
),
cand AS (
    SELECT r.line, {key} FROM _ingest_rows r ANTI JOIN stored_conflict c USING (line)
    WHERE r.reason IS NULL
),
firsts AS (
    SELECT {key}, min(line) AS first_line FROM cand GROUP BY {key} HAVING count(*) > 1
),
repeats AS (
    SELECT x.line, t.first_line, {same} AS same_as_first
    FROM cand x
    JOIN firsts t USING ({key})
    JOIN _ingest_rows c ON c.line = x.line
    JOIN _ingest_rows f ON f.line = t.first_line
    WHERE x.line <> t.first_line
),
stored_dup AS (
    SELECT line, count(*) AS n_dup FROM _ingest_match WHERE status = 'dup' GROUP BY line
)
SELECT line, 'quarantined' AS outcome, reason, NULL::INTEGER AS first_line
FROM _ingest_rows WHERE reason IS NOT NULL
UNION ALL
SELECT line, 'quarantined',
       n || ' value(s) differ from those stored from file ' || file_id || ' line ' || stored_line
       || ' (see table conflicts)',
       NULL
FROM stored_conflict
UNION ALL
SELECT line,
       CASE WHEN same_as_first THEN 'duplicate' ELSE 'quarantined' END,
       CASE WHEN NOT same_as_first
            THEN 'same time as line ' || first_line || ' with different values'
                 || ' (see table conflicts)' END,
       first_line
FROM repeats
UNION ALL
SELECT d.line, 'duplicate', NULL, NULL
FROM stored_dup d SEMI JOIN cand USING (line) JOIN _ingest_rows c USING (line)
ANTI JOIN repeats USING (line)
WHERE d.n_dup = {n_values};
