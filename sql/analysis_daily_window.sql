-- The stored daily sums of the site-local days in [$start, $end).
SELECT * EXCLUDE (analysis_id)
FROM analysis_daily
WHERE analysis_id = $id
  AND day >= CAST(timezone($tz, $start) AS DATE) AND day < CAST(timezone($tz, $end) AS DATE)
ORDER BY day, inverter_id
