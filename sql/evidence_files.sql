-- Every ingested logger file, in ingest order: the analysis behind any window reads the whole
-- history, so a bundle carries all of it.
SELECT file_id, path, logger, sha256, size_bytes, first_ts, last_ts
FROM source_files
ORDER BY file_id;
