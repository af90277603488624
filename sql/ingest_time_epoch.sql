-- Unix epoch seconds (UTC by definition); beyond +-1e11 s (about year 5100) a number is not
-- read as seconds (milliseconds, say) and the line is quarantined.
timed AS (
    SELECT *,
           CASE WHEN shape_error IS NULL AND ts IS NULL
                THEN 'time ''' || time_text || ''' is not a number of seconds since 1970'
           END AS time_error
    FROM (SELECT *, CASE WHEN abs(seconds) < 1e11 THEN to_timestamp(seconds) END AS ts
          FROM (SELECT *, TRY_CAST(time_text AS DOUBLE) AS seconds FROM typed))
)
