-- The run with this parameter hash: (model_run_id, last_file_id).
SELECT model_run_id, last_file_id FROM model_runs WHERE params_hash = ?;
