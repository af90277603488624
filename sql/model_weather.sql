-- Site weather averaged into the model's intervals (rain summed). $iv interval [s];
-- $start, $end: interval starts, end exclusive.
SELECT to_timestamp(floor(epoch(ts) / $iv) * $iv) AS ts,
       favg(value) FILTER (WHERE quantity = 'ghi_wm2') AS ghi_wm2,
       favg(value) FILTER (WHERE quantity = 'dhi_wm2') AS dhi_wm2,
       favg(value) FILTER (WHERE quantity = 'dni_wm2') AS dni_wm2,
       favg(value) FILTER (WHERE quantity = 'poa_wm2') AS poa_wm2,
       favg(value) FILTER (WHERE quantity = 'poa_rear_wm2') AS poa_rear_wm2,
       favg(value) FILTER (WHERE quantity = 'temp_air_c') AS temp_air_c,
       favg(value) FILTER (WHERE quantity = 'temp_module_c') AS temp_module_c,
       favg(value) FILTER (WHERE quantity = 'wind_speed_ms') AS wind_speed_ms,
       fsum(value) FILTER (WHERE quantity = 'rain_mm') AS rain_mm
FROM readings
WHERE device = 'site' AND ts >= $start AND ts < $end
GROUP BY 1
ORDER BY 1;
