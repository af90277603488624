-- Power against energy of the same device, per (file, channel), as stored. Per interval of the
-- device's energy channel: energy = the interval energy readings, else the register's step from
-- a reading one interval earlier (a register reading labelled t counts up to the end of the
-- interval that starts at t); power x interval = the mean of the power readings in it x its
-- length. For each power file: ratio = its power x interval / energy (all files); for each
-- interval-energy file: ratio = its energy / power x interval (all files). Only intervals where
-- the reference is above $min_share of the rating x interval (_units_ratings: device, rating_w)
-- and the file's value is positive.
WITH cv AS (
    SELECT v.file_id, v.channel_id, c.quantity, c.device, v.ts, v.value
    FROM channel_values v JOIN channels c USING (channel_id)
    WHERE c.device <> 'site'
      AND c.quantity IN ('ac_power_w', 'energy_interval_wh', 'energy_register_wh')
),
iv AS (
    SELECT device, min(interval_min) FILTER (WHERE quantity <> 'ac_power_w') * 60 AS e_s
    FROM channel_intervals GROUP BY device
),
reg AS (
    SELECT device, ts, value - lag(value) OVER w AS energy,
           epoch(ts) - epoch(lag(ts) OVER w) AS step_s
    FROM (SELECT device, ts, favg(value) AS value FROM cv
          WHERE quantity = 'energy_register_wh' GROUP BY ALL)
    WINDOW w AS (PARTITION BY device ORDER BY ts)
),
energy AS (
    SELECT device, ts, favg(energy) AS energy FROM (
        SELECT device, ts, value AS energy FROM cv WHERE quantity = 'energy_interval_wh'
        UNION ALL
        SELECT r.device, r.ts, r.energy FROM reg r JOIN iv USING (device)
        WHERE r.step_s = iv.e_s
          AND NOT EXISTS (SELECT 1 FROM cv WHERE cv.quantity = 'energy_interval_wh'
                          AND cv.device = r.device))
    GROUP BY ALL
),
power AS (
    SELECT cv.file_id, cv.channel_id, cv.device, iv.e_s,
           to_timestamp(floor(epoch(cv.ts) / iv.e_s) * iv.e_s) AS bucket,
           favg(cv.value) AS p
    FROM cv JOIN iv USING (device)
    WHERE cv.quantity = 'ac_power_w' AND iv.e_s IS NOT NULL
    GROUP BY ALL
),
power_all AS (
    SELECT device, e_s, bucket, favg(p) AS p FROM power GROUP BY ALL
),
pairs AS (
    SELECT p.file_id, p.channel_id, p.p * p.e_s / 3600 / e.energy AS ratio
    FROM power p JOIN energy e ON e.device = p.device AND e.ts = p.bucket
    JOIN _units_ratings r ON r.device = p.device
    WHERE e.energy > $min_share * r.rating_w * p.e_s / 3600 AND p.p > 0
    UNION ALL
    SELECT cv.file_id, cv.channel_id, cv.value / (a.p * a.e_s / 3600) AS ratio
    FROM cv JOIN power_all a ON a.device = cv.device AND a.bucket = cv.ts
    JOIN _units_ratings r ON r.device = cv.device
    WHERE cv.quantity = 'energy_interval_wh' AND cv.value > 0
      AND a.p > $min_share * r.rating_w
)
SELECT file_id, channel_id, count(*) AS n,
       quantile_cont(ratio, 0.25) AS q25, quantile_cont(ratio, 0.5) AS q50,
       quantile_cont(ratio, 0.75) AS q75
FROM pairs
GROUP BY ALL
ORDER BY file_id, channel_id;
