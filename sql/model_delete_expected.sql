-- Drop run $id's expected rows in [$start, $end) before they are recomputed.
DELETE FROM expected WHERE model_run_id = $id AND ts >= $start AND ts < $end;
