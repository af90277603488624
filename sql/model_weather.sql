-- Site weather averaged into the model's intervals (rain summed). {columns}: one
-- ", favg(value) FILTER (WHERE quantity = '<q>') AS <q>" (fsum for rain_mm) per site quantity
-- that has a channel (perfcheck.model.load_weather): each aggregate costs as much as the
-- grouping itself, also for a quantity that is not logged. $iv interval [s]; $start, $end:
-- interval starts, end exclusive.
SELECT to_timestamp(floor(epoch(ts) / $iv) * $iv) AS ts{columns}
FROM readings
WHERE device = 'site' AND ts >= $start AND ts < $end
GROUP BY 1
ORDER BY 1;
