-- Report-by-exception values carried forward: for each stored value of a channel read from the
-- files of one historian logger ($logger, grid $iv seconds, limit $limit seconds), the grid
-- instants after it, before the channel's next stored value (of that logger's files) and at
-- most $limit after it, that hold no stored value of the channel, get its value (with its file
-- and line). A value is never carried past the next one, nor across a longer silence.
INSERT INTO carried_values
WITH own AS (
    SELECT v.ts, v.channel_id, v.value, v.file_id, v.line,
           lead(v.ts) OVER (PARTITION BY v.channel_id ORDER BY v.ts) AS next_ts
    FROM channel_values v JOIN source_files f USING (file_id)
    WHERE f.logger = $logger
),
grid AS (
    SELECT unnest(generate_series(
               to_timestamp((floor(epoch(ts) / $iv) + 1) * $iv),
               least(coalesce(next_ts - INTERVAL 1 MICROSECOND, ts + to_seconds($limit)),
                     ts + to_seconds($limit)),
               to_seconds($iv))) AS g,
           channel_id, value, file_id, line
    FROM own
    WHERE to_timestamp((floor(epoch(ts) / $iv) + 1) * $iv) <= ts + to_seconds($limit)
)
SELECT g, channel_id, value, file_id, line
FROM grid
WHERE NOT EXISTS (SELECT 1 FROM channel_values s
                  WHERE s.channel_id = grid.channel_id AND s.ts = grid.g);
