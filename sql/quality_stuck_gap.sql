-- stuck: a value repeated unchanged (exactly) over daylight intervals (sun above
-- perfcheck.quality.DAY_ELEVATION_DEG) where the quantity should vary. A run is stuck when
--  * it holds at least $stuck_min_intervals daylight readings spanning $stuck_minutes, and
--  * so long a run is improbable for this channel: if daylight steps repeated independently
--    at the channel's own repeat rate p, the chance of a run this long anywhere among its n
--    daylight steps, about n * p^(k-1), is below $stuck_chance. This adapts to each sensor's
--    resolution (a 0.1 C thermometer repeats often, a pyranometer rarely).
-- Not stuck: runs at rest (at or below the channel's rest_level: zero power or irradiance,
-- calm wind); AC power (or interval energy) at or above $clipping_share of the rating
-- (clipping and export limits hold it flat); quantities that accumulate in steps
-- (perfcheck.quality.NEVER_STUCK: energy registers, rain), which hold still whenever the
-- increment is below their resolution. Every reading of a stuck run is flagged.
-- gap: missing intervals between two readings of a channel (a step longer than 1.5 intervals).
-- One flag at the first missing interval start; detail: how many are missing, up to when.
-- Both follow each channel in time order, which perfcheck.quality.runs_and_gaps does, one
-- channel at a time: _quality_runs holds the readings that can belong to a stuck run (ts,
-- channel_id, value, day, run_id: a run is a stretch of equal values), _quality_rates per
-- channel the daylight steps not at rest (steps) and those that repeat the value before
-- (repeats), _quality_gaps each reading followed by a gap (ts, next_ts, channel_id).
INSERT INTO flags
WITH rates AS (
    SELECT channel_id, repeats / greatest(steps, 1) AS p_repeat, greatest(steps, 1) AS n_steps
    FROM _quality_rates
),
stats AS (
    SELECT channel_id, run_id, any_value(value) AS value, count(*) AS n,
           count(*) FILTER (WHERE day) AS n_day, min(ts) AS t0, max(ts) AS t1
    FROM _quality_runs
    GROUP BY channel_id, run_id
),
stuck AS (
    SELECT s.*, r.p_repeat, c.quantity, c.device
    FROM stats s JOIN rates r USING (channel_id) JOIN _quality_channels c USING (channel_id)
    WHERE s.n_day >= greatest($stuck_min_intervals, ceil($stuck_minutes / c.interval_min))
      AND (r.p_repeat = 0
           OR (s.n_day - 1) * ln(r.p_repeat) + ln(r.n_steps) < ln($stuck_chance))
      AND NOT (c.quantity = 'ac_power_w' AND s.value >= $clipping_share * c.rating_w)
      AND NOT (c.quantity = 'energy_interval_wh'
               AND s.value >= $clipping_share * c.rating_w * c.interval_min / 60)
),
gaps AS (
    SELECT g.ts, g.next_ts, c.quantity, c.device, c.interval_min,
           CAST(round((epoch(g.next_ts) - epoch(g.ts)) / (60 * c.interval_min)) AS BIGINT) - 1
               AS missing
    FROM _quality_gaps g JOIN _quality_channels c USING (channel_id)
)
SELECT u.ts, t.quantity, t.device, 'stuck',
       printf('%.6g unchanged for %d intervals (%d in daylight), %s to %s UTC; '
              || 'this channel repeats a value in %.1f %% of daylight steps',
              t.value, t.n, t.n_day, strftime(t.t0, '%Y-%m-%d %H:%M'),
              strftime(t.t1, '%Y-%m-%d %H:%M'), 100 * t.p_repeat)
FROM _quality_runs u JOIN stuck t USING (channel_id, run_id)
UNION ALL
SELECT ts + to_minutes(interval_min), quantity, device, 'gap',
       missing || ' missing interval(s) of ' || interval_min || ' min, up to '
       || strftime(next_ts - to_minutes(interval_min), '%Y-%m-%d %H:%M') || ' UTC'
FROM gaps;
