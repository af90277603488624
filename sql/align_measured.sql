-- Inverter readings per model interval: mean AC power, mean interval energy, and the last
-- energy-register value with its instant. $iv interval [s]; $start, $end interval starts.
SELECT to_timestamp(floor(epoch(ts) / $iv) * $iv) AS ts,
       device AS inverter_id,
       favg(value) FILTER (WHERE quantity = 'ac_power_w') AS ac_power_w,
       favg(value) FILTER (WHERE quantity = 'energy_interval_wh') AS energy_interval_wh,
       arg_max(value, ts) FILTER (WHERE quantity = 'energy_register_wh'
                                  AND value IS NOT NULL) AS register_wh,
       max(ts) FILTER (WHERE quantity = 'energy_register_wh' AND value IS NOT NULL)
           AS register_ts
FROM readings
WHERE device NOT IN ('site', 'plant') AND ts >= $start AND ts < $end
  AND quantity IN ('ac_power_w', 'energy_interval_wh', 'energy_register_wh')
GROUP BY 1, 2
ORDER BY 2, 1;
