-- Keep the ingested bytes of a file version (see source_copies); a version stored already is
-- kept as it is.
INSERT OR IGNORE INTO source_copies VALUES ($sha256, $zlib_bytes);
