-- The ingested bytes of one file version (zlib), if a copy was kept.
SELECT zlib_bytes FROM source_copies WHERE sha256 = $sha256;
