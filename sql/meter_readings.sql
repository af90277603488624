-- The export meter's readings (device 'plant') per stored instant, in time order: its
-- cumulative register [Wh] and its interval energy [Wh] (perfcheck.meter).
SELECT ts,
       favg(value) FILTER (WHERE quantity = 'energy_register_wh') AS register_wh,
       favg(value) FILTER (WHERE quantity = 'energy_interval_wh') AS energy_interval_wh
FROM readings
WHERE device = 'plant' AND value IS NOT NULL
  AND quantity IN ('energy_register_wh', 'energy_interval_wh')
GROUP BY ts
ORDER BY ts;
