-- Logger files whose readings overlap the period [$start, $end), oldest first.
SELECT file_id, path, logger, sha256, size_bytes, rows_read, rows_loaded, rows_duplicate,
       rows_quarantined, first_ts, last_ts
FROM source_files
WHERE last_ts >= $start AND first_ts < $end
ORDER BY first_ts, path;
