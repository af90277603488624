-- Naive site-local wall-clock times -> UTC. Each wall time is tried with the UTC offset in force
-- 14 h before and 14 h after it; a candidate is valid when it maps back to the same wall time.
-- Two valid candidates: the repeated hour when clocks go back. Its lines are read with the
-- summer offset until the wall clock steps back within that hour (order of lines), then with
-- the winter offset. No valid candidate: the wall time was skipped when clocks went forward;
-- the line is quarantined, never shifted. A tall file (dev: the row's device; NULL in a wide
-- file) written device by device, each device's lines of the repeated hour in one block, has
-- each device's lines ordered apart; one whose devices' lines interleave there is ordered in
-- time as a whole, so a device seen only in the second pass (its first-pass values missing) is
-- read in it. Times are microseconds since 1970 (wall times as if they were UTC); only
-- timezone() consults the zone rules.
local_wall AS (
    SELECT *, epoch_us(naive) AS wall
    FROM (SELECT *, wall_clock(time_text, $time_format) AS naive FROM typed)
),
local_cand AS (
    SELECT *,
           wall - (epoch_us(timezone($tz, make_timestamptz(wall - 50400000000)))
                   - (wall - 50400000000)) AS cand_before,
           wall - (epoch_us(timezone($tz, make_timestamptz(wall + 50400000000)))
                   - (wall + 50400000000)) AS cand_after
    FROM local_wall
),
local_ok AS (
    SELECT *,
           coalesce(epoch_us(timezone($tz, make_timestamptz(cand_before))) = wall, false)
               AS ok_before,
           coalesce(epoch_us(timezone($tz, make_timestamptz(cand_after))) = wall, false)
               AS ok_after
    FROM local_cand
),
local_amb AS (
    SELECT *, ok_before AND ok_after AND cand_before <> cand_after AS ambiguous
    FROM local_ok
),
local_pass AS (
    -- the lines read as one pass: each device's (pass_dev is dev; in a wide file NULL), or all
    -- lines of a tall file in time order (NULL; sql/ingest_time_local_order.sql tells which)
    SELECT *, {pass_dev} AS pass_dev
    FROM local_amb
),
local_step AS (
    SELECT *,
           coalesce(naive < lag(naive) OVER w, false) AS stepped_back
    FROM local_pass
    WINDOW w AS (PARTITION BY CASE WHEN ambiguous THEN naive::DATE END, pass_dev ORDER BY line)
),
timed AS (
    SELECT *,
           make_timestamptz(
               CASE WHEN ambiguous THEN
                        CASE WHEN sum(stepped_back::INTEGER) OVER (
                                      PARTITION BY CASE WHEN ambiguous THEN naive::DATE END,
                                                   pass_dev
                                      ORDER BY line) > 0
                             THEN greatest(cand_before, cand_after)
                             ELSE least(cand_before, cand_after) END
                    WHEN ok_before THEN cand_before
                    WHEN ok_after THEN cand_after
               END) AS ts,
           CASE WHEN shape_error IS NOT NULL THEN NULL
                WHEN naive IS NULL
                THEN 'time ''' || time_text || ''' does not match the format ''' || $time_format
                     || ''''
                WHEN NOT ok_before AND NOT ok_after
                THEN 'local time ''' || time_text || ''' does not exist in ' || $tz
                     || ' (clocks went forward)'
           END AS time_error
    FROM local_step
)
