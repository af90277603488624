-- Level of each (file, channel) of inverter and plant power and interval energy, as stored (no
-- correction applied): positive values and their 99th percentile, and the correlation with the
-- cosine of the sun's zenith over the daylight rows (_quality_sun, mu0 above 0.1).
WITH v AS (
    SELECT v.file_id, v.channel_id, c.quantity, c.device, v.ts, v.value, ci.interval_min
    FROM channel_values v
    JOIN channels c USING (channel_id)
    JOIN channel_intervals ci USING (quantity, device)
    WHERE c.quantity IN ('ac_power_w', 'dc_power_w', 'energy_interval_wh')
      AND c.device <> 'site'
)
SELECT v.file_id, v.channel_id, v.quantity, v.device, v.interval_min,
       count(*) FILTER (WHERE v.value > 0) AS n_positive,
       quantile_cont(v.value, 0.99) FILTER (WHERE v.value > 0) AS p99,
       count(*) FILTER (WHERE s.mu0 > 0.1) AS n_day,
       corr(v.value, s.mu0) FILTER (WHERE s.mu0 > 0.1) AS sun_corr
FROM v
LEFT JOIN _quality_sun s ON s.ts = v.ts AND s.interval_min = v.interval_min
GROUP BY ALL
ORDER BY v.file_id, v.channel_id;
