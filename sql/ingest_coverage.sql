-- Data coverage per channel and site-local month: intervals expected between the channel's
-- first and last reading, intervals present, their share, and quarantined lines (by the month
-- of the line's instant) of the files of the loggers that carry the channel.
-- Intervals are those stored at ingest (view channel_intervals, table loggers).
WITH chan AS (
    SELECT quantity, device, interval_min FROM channel_intervals
),
span AS (
    SELECT v.channel_id, c.quantity, c.device, i.interval_min,
           min(v.ts) AS first_ts, max(v.ts) AS last_ts
    FROM channel_values v
    JOIN channels c USING (channel_id)
    JOIN chan i USING (quantity, device)
    GROUP BY ALL
),
months AS (
    SELECT s.*, unnest(generate_series(date_trunc('month', timezone($tz, s.first_ts)),
                                       date_trunc('month', timezone($tz, s.last_ts)),
                                       INTERVAL 1 MONTH)) AS month_start
    FROM span s
),
bounds AS (
    SELECT *,
           greatest(timezone($tz, month_start), first_ts) AS lo,
           least(timezone($tz, month_start + INTERVAL 1 MONTH),
                 last_ts + to_minutes(interval_min)) AS hi
    FROM months
),
present AS (
    SELECT channel_id, date_trunc('month', timezone($tz, ts)) AS month_start,
           count(*) AS n
    FROM channel_values GROUP BY ALL
),
quar AS (
    SELECT i.quantity, i.device, date_trunc('month', timezone($tz, q.ts)) AS month_start,
           count(*) AS n
    FROM quarantine q
    JOIN source_files f USING (file_id)
    JOIN loggers l ON l.name = f.logger
    JOIN logger_channels lc USING (logger_id)
    JOIN channels i USING (channel_id)
    GROUP BY ALL
)
SELECT strftime(b.month_start, '%Y-%m') AS month, b.quantity, b.device,
       CAST(ceil((epoch(b.hi) - epoch(b.lo)) / (60 * b.interval_min)) AS BIGINT) AS expected,
       coalesce(p.n, 0) AS present,
       coalesce(p.n, 0) / greatest(ceil((epoch(b.hi) - epoch(b.lo)) / (60 * b.interval_min)), 1)
           AS share,
       coalesce(q.n, 0) AS quarantined
FROM bounds b
LEFT JOIN present p USING (channel_id, month_start)
LEFT JOIN quar q USING (quantity, device, month_start)
ORDER BY b.device, b.quantity, month
