-- Logger files with readings before $end, in ingest order: the period's own files plus the
-- earlier ones that reference windows (detector baselines, typical cell temperature) draw on.
SELECT file_id, path, logger, sha256, size_bytes, first_ts, last_ts
FROM source_files
WHERE first_ts < $end
ORDER BY file_id;
