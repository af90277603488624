UPDATE runs SET finished_at = $finished_at, exit_code = $exit_code, files_new = $files_new,
                out_dir = $out_dir
WHERE run_id = $run_id;
