-- gap: missing intervals between two readings of a channel (a step longer than 1.5 intervals).
-- One flag at the first missing interval start; detail: how many are missing, up to when.
INSERT INTO flags
WITH r AS (
    SELECT r.quantity, r.device, r.ts, c.interval_min,
           lead(r.ts) OVER (PARTITION BY r.quantity, r.device ORDER BY r.ts) AS next_ts
    FROM readings r JOIN _quality_channels c USING (quantity, device)
),
g AS (
    SELECT *, CAST(round((epoch(next_ts) - epoch(ts)) / (60 * interval_min)) AS BIGINT) - 1
                  AS missing
    FROM r
    WHERE epoch(next_ts) - epoch(ts) > 1.5 * 60 * interval_min
)
SELECT ts + to_minutes(interval_min), quantity, device, 'gap',
       missing || ' missing interval(s) of ' || interval_min || ' min, up to '
       || strftime(next_ts - to_minutes(interval_min), '%Y-%m-%d %H:%M') || ' UTC'
FROM g;
