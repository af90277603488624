-- The content hashes of every ingested logger file, in a fixed order (an analysis input).
SELECT sha256 FROM source_files ORDER BY sha256, file_id
