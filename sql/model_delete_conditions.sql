-- Drop run $id's condition rows in [$start, $end) before they are recomputed.
DELETE FROM model_conditions WHERE model_run_id = $id AND ts >= $start AND ts < $end;
