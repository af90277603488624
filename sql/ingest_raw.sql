-- The raw text of the quarantined lines that were readable (conflicts, repeated times): only
-- unreadable lines keep their text in _ingest_rows, so the file's lines are read once more,
-- and only when such lines exist.
UPDATE _ingest_rows AS r SET raw = l.raw
FROM ({lines}) l
WHERE r.line = l.line
  AND r.line IN (SELECT line FROM _ingest_outcome WHERE outcome = 'quarantined')
  AND r.raw IS NULL
