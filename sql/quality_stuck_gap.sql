-- stuck: a value repeated unchanged (exactly) over daylight intervals (sun above
-- $day_elevation degrees) where the quantity should vary. A run is stuck when
--  * it holds at least $stuck_min_intervals daylight readings spanning $stuck_minutes, and
--  * so long a run is improbable for this channel: if daylight steps repeated independently
--    at the channel's own repeat rate p, the chance of a run this long anywhere among its n
--    daylight steps, about n * p^(k-1), is below $stuck_chance. This adapts to each sensor's
--    resolution (a 0.1 C thermometer repeats often, a pyranometer rarely).
-- Not stuck: runs at rest (at or below the channel's rest_level: zero power or irradiance,
-- calm wind); AC power (or
-- interval energy) at or above $clipping_share of the rating (clipping and export limits hold
-- it flat); quantities that accumulate in steps ($never_stuck: energy registers, rain), which
-- hold still whenever the increment is below their resolution. Every reading of a stuck run is
-- flagged.
-- gap: missing intervals between two readings of a channel (a step longer than 1.5 intervals).
-- One flag at the first missing interval start; detail: how many are missing, up to when.
-- Both follow each channel in time order, so they share one sort (the window w), which carries
-- only the channel id, the instant, the value and booleans; names and ratings join the few
-- runs and gaps found.
INSERT INTO flags
WITH v AS (  -- the booleans first: the sort of the window then carries no text
    SELECT r.ts, c.channel_id, r.value,
           list_contains($never_stuck, r.quantity) AS never_stuck,
           coalesce(s.elevation_deg > $day_elevation, false) AS day,
           coalesce(abs(r.value) <= c.rest_level, false) AS at_rest
    FROM readings r
    JOIN _quality_channels c USING (channel_id)
    LEFT JOIN _quality_sun s ON s.ts = r.ts AND s.interval_min = c.interval_min
),
r AS (
    SELECT *,
           CASE WHEN value IS DISTINCT FROM lag(value) OVER w THEN 1 ELSE 0 END AS starts,
           value IS NOT DISTINCT FROM lead(value) OVER w AS repeats_next,
           lead(ts) OVER w AS next_ts
    FROM v
    WINDOW w AS (PARTITION BY channel_id ORDER BY ts)
),
-- Only the readings that can belong to a stuck run get a run id (never_stuck quantities
-- only share the sort, for their gaps): at rest is a property of the
-- value (the same over a whole run), and a run of one reading is too short unless
-- $stuck_min_intervals allows it. Leaving the others out changes no run, only the time taken.
runs AS (
    SELECT *, sum(starts) OVER (PARTITION BY channel_id ORDER BY ts
                                ROWS UNBOUNDED PRECEDING) AS run_id
    FROM r
    WHERE NOT never_stuck AND NOT at_rest
      AND (starts = 0 OR repeats_next OR $stuck_min_intervals < 2)
),
rates AS (
    SELECT channel_id,
           count(*) FILTER (WHERE day AND NOT at_rest AND starts = 0)
               / greatest(count(*) FILTER (WHERE day AND NOT at_rest), 1) AS p_repeat,
           greatest(count(*) FILTER (WHERE day AND NOT at_rest), 1) AS n_steps
    FROM r WHERE NOT never_stuck GROUP BY channel_id
),
stats AS (
    SELECT channel_id, run_id, any_value(value) AS value, count(*) AS n,
           count(*) FILTER (WHERE day) AS n_day, bool_or(at_rest) AS at_rest,
           min(ts) AS t0, max(ts) AS t1
    FROM runs
    GROUP BY channel_id, run_id
),
stuck AS (
    SELECT s.*, r.p_repeat, c.quantity, c.device
    FROM stats s JOIN rates r USING (channel_id) JOIN _quality_channels c USING (channel_id)
    WHERE s.n_day >= greatest($stuck_min_intervals, ceil($stuck_minutes / c.interval_min))
      AND (r.p_repeat = 0
           OR (s.n_day - 1) * ln(r.p_repeat) + ln(r.n_steps) < ln($stuck_chance))
      AND NOT s.at_rest
      AND NOT (c.quantity = 'ac_power_w' AND s.value >= $clipping_share * c.rating_w)
      AND NOT (c.quantity = 'energy_interval_wh'
               AND s.value >= $clipping_share * c.rating_w * c.interval_min / 60)
),
gaps AS (
    SELECT r.ts, r.next_ts, c.quantity, c.device, c.interval_min,
           CAST(round((epoch(r.next_ts) - epoch(r.ts)) / (60 * c.interval_min)) AS BIGINT) - 1
               AS missing
    FROM r JOIN _quality_channels c USING (channel_id)
    WHERE epoch_us(r.next_ts) - epoch_us(r.ts) > 90000000 * c.interval_min  -- 1.5 intervals [us]
)
SELECT u.ts, t.quantity, t.device, 'stuck',
       printf('%.6g unchanged for %d intervals (%d in daylight), %s to %s UTC; '
              || 'this channel repeats a value in %.1f %% of daylight steps',
              t.value, t.n, t.n_day, strftime(t.t0, '%Y-%m-%d %H:%M'),
              strftime(t.t1, '%Y-%m-%d %H:%M'), 100 * t.p_repeat)
FROM runs u JOIN stuck t USING (channel_id, run_id)
UNION ALL
SELECT ts + to_minutes(interval_min), quantity, device, 'gap',
       missing || ' missing interval(s) of ' || interval_min || ' min, up to '
       || strftime(next_ts - to_minutes(interval_min), '%Y-%m-%d %H:%M') || ' UTC'
FROM gaps;
