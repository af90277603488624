-- The model_run_id of the run with this parameter hash.
SELECT model_run_id FROM model_runs WHERE params_hash = ?;
