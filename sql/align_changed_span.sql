-- First and last instant of readings from source files after $file_id (NULLs if none).
SELECT min(ts) AS first_ts, max(ts) AS last_ts FROM readings WHERE file_id > $file_id;
