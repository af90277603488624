-- Expected, measured and unexplained energy [kWh] of [$start, $end) over the intervals that
-- have both a measured and an expected value.
SELECT fsum(expected_wh) / 1000.0, fsum(measured_wh) / 1000.0, fsum(unexplained_wh) / 1000.0
FROM ledger
WHERE analysis_id = $id AND ts >= $start AND ts < $end
  AND measured_wh IS NOT NULL AND expected_wh IS NOT NULL
