-- One event of a run (see schema_50_detect.sql).
INSERT INTO events VALUES ($period_start, $period_end, $seq, $kind, $scope, $start_ts, $end_ts,
    $energy_loss_kwh, $energy_loss_kwh_low, $energy_loss_kwh_high, $method, $evidence_json,
    $detail_json, $created_at);
