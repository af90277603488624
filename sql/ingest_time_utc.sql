-- Naive times that are UTC, read with the logger's strptime format.
timed AS (
    SELECT *,
           CASE WHEN shape_error IS NULL AND ts IS NULL
                THEN 'time ''' || time_text || ''' does not match the format ''' || $time_format
                     || '''' END AS time_error
    FROM (SELECT *, make_timestamptz(epoch_us(wall_clock(time_text, $time_format))) AS ts FROM typed)
)
