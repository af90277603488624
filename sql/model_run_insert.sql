-- A new model run for a parameter set; returns its id.
INSERT INTO model_runs (model_run_id, params_hash, parameters_json, versions_json, created_at,
                        updated_at, last_file_id)
VALUES (nextval('model_run_seq'), $hash, $params, $versions, $now, $now, 0)
RETURNING model_run_id;
