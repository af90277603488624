-- The physical lines of one logger file after its header (line > $header_end), numbered from 1,
-- from its text $text (the bytes that were hashed, bound by perfcheck.ingest): split on LF,
-- CRLF first turned into LF so that CRLF files read alike; empty lines are not rows and are
-- left out. Used inside ingest_rows.sql and ingest_raw.sql.
SELECT line, raw
FROM (
    SELECT generate_subscripts(l, 1)::INTEGER AS line, unnest(l) AS raw
    FROM (
        SELECT string_split(CASE WHEN $crlf THEN replace(content, chr(13) || chr(10), chr(10))
                                 ELSE content END, chr(10)) AS l
        FROM (SELECT decode($text) AS content)
    )
)
WHERE line > $header_end AND raw <> ''
