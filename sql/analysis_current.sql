-- The current analysis.
SELECT analysis_id, input_hash, first_ts, end_ts FROM analyses WHERE is_current
