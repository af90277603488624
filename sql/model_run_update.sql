-- Record that run $id last ran with source files up to $file_id (keep earlier checks if none
-- new).
UPDATE model_runs
SET last_file_id = $file_id, updated_at = $now, checks_json = coalesce($checks, checks_json)
WHERE model_run_id = $id;
