INSERT INTO analyses VALUES ($id, $hash, $inputs, $created_at, $first_ts, $end_ts, $settings,
                             $model, $degradation, false)
