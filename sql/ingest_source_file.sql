-- Provenance and accounting of one file: every line not in _ingest_outcome was loaded.
INSERT INTO source_files
SELECT $file_id, $path, $logger, $sha256, $size_bytes,
       (SELECT count(*) FROM _ingest_rows),
       (SELECT count(*) FROM _ingest_rows) - count(*),
       count(*) FILTER (WHERE o.outcome = 'duplicate'),
       count(*) FILTER (WHERE o.outcome = 'quarantined'),
       (SELECT count(*) FROM conflicts WHERE new_file_id = $file_id),
       (SELECT min(ts) FROM _ingest_rows WHERE reason IS NULL),
       (SELECT max(ts) FROM _ingest_rows WHERE reason IS NULL),
       now(), $tool_version
FROM _ingest_outcome o
RETURNING file_id, rows_read, rows_loaded, rows_duplicate, rows_quarantined, conflicts,
          first_ts, last_ts
