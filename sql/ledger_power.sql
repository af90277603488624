-- The ledger's measured and expected power [W] of [$start, $end).
SELECT ts, inverter_id, measured_wh * 3600.0 / interval_s AS measured_ac_w,
       expected_wh * 3600.0 / interval_s AS expected_ac_w
FROM ledger
WHERE analysis_id = $id AND ts >= $start AND ts < $end
