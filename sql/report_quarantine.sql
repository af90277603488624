-- The quarantined lines of the period [$start, $end): those whose instant (or that of the
-- nearest readable line before them) falls in it, by file and line.
SELECT f.path AS file, q.line, q.ts, q.reason, q.raw
FROM quarantine q
JOIN source_files f USING (file_id)
WHERE q.ts >= $start AND q.ts < $end
ORDER BY f.file_id, q.line
