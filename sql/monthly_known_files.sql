-- sha256 of every logger file already ingested (the monthly job ingests only new ones).
SELECT DISTINCT sha256 FROM source_files;
