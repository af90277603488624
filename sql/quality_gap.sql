-- gap: missing intervals between two readings of a channel (a step longer than 1.5 intervals).
-- One flag at the first missing interval start; detail: how many are missing, up to when.
-- The window sorts only the channel id and the instant; the names join the few gaps found.
INSERT INTO flags
WITH r AS (
    SELECT c.channel_id, c.interval_min, r.ts,
           lead(r.ts) OVER (PARTITION BY c.channel_id ORDER BY r.ts) AS next_ts
    FROM readings r JOIN _quality_channels c USING (channel_id)
),
g AS (
    SELECT *, CAST(round((epoch(next_ts) - epoch(ts)) / (60 * interval_min)) AS BIGINT) - 1
                  AS missing
    FROM r
    WHERE epoch_us(next_ts) - epoch_us(ts) > 90000000 * interval_min  -- 1.5 intervals [us]
)
SELECT g.ts + to_minutes(g.interval_min), c.quantity, c.device, 'gap',
       g.missing || ' missing interval(s) of ' || g.interval_min || ' min, up to '
       || strftime(g.next_ts - to_minutes(g.interval_min), '%Y-%m-%d %H:%M') || ' UTC'
FROM g JOIN _quality_channels c USING (channel_id);
