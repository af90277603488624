-- ISO 8601 with a UTC offset ('2024-06-01T12:00:00+02:00', '...Z'). A time without an offset is
-- refused: it would be read as UTC without anyone having said so.
timed AS (
    SELECT *,
           CASE WHEN shape_error IS NULL AND ts IS NULL
                THEN CASE WHEN has_offset
                          THEN 'time ''' || time_text || ''' is not ISO 8601'
                          ELSE 'time ''' || time_text || ''' has no UTC offset' END
           END AS time_error
    FROM (SELECT *, CASE WHEN has_offset THEN TRY_CAST(iso AS TIMESTAMPTZ) END AS ts
          FROM (SELECT *, regexp_matches(iso, '(Z|[+-][0-9]{2}(:?[0-9]{2})?)$') AS has_offset
                FROM (SELECT *, trim(time_text) AS iso FROM typed)))
)
