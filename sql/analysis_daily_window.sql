-- The stored daily sums of the site-local days in [$start, $end), of one $basis ('inverter'
-- or 'meter', see perfcheck.meter).
SELECT * EXCLUDE (analysis_id, basis)
FROM analysis_daily
WHERE analysis_id = $id AND coalesce(basis, 'inverter') = $basis
  AND day >= CAST(timezone($tz, $start) AS DATE) AND day < CAST(timezone($tz, $end) AS DATE)
ORDER BY day, inverter_id
