INSERT INTO runs (run_id, command, started_at, tool_version)
VALUES (nextval('run_id'), $command, $started_at, $tool_version)
RETURNING run_id;
