-- The quarantined lines, by file (as given when ingested) and line number, with the reason and
-- the raw text; reason_kind is the reason with its quoted values left out ('...'), so that
-- lines quarantined for the same kind of reason count together.
SELECT f.path AS file, q.line, q.ts, q.reason,
       regexp_replace(q.reason, '''[^'']*''', '''...''', 'g') AS reason_kind,
       q.raw
FROM quarantine q
JOIN source_files f USING (file_id)
ORDER BY f.file_id, q.line
