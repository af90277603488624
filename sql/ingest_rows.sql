-- Split, type and check every data line of one file: one output row per non-empty input line,
-- with the instant (UTC, interval start), the values in SI units and, for a line that cannot be
-- read, the reason and the raw text. A line cut short (too few fields, a quote not closed) or
-- holding bytes that are not UTF-8, anywhere in the file, is quarantined with its reason and
-- the other lines are loaded.
-- Placeholders in braces are filled by perfcheck.ingest with sql/ingest_lines.sql and with
-- expressions built from field positions and fixed unit factors only; everything from the
-- user's files (delimiter, sentinels, formats, column names, time zone) arrives as a bound
-- parameter. Instants are moved as microseconds since 1970 (epoch_us, make_timestamptz): no
-- time-zone arithmetic per row. An instant outside the years 1678 to 2261 (what pandas'
-- nanosecond timestamps hold, so what every later stage can read) is quarantined with its
-- reason, never stored.
CREATE OR REPLACE TEMP TABLE _ingest_rows AS
WITH lines AS (
    {lines}
),
split AS (
    SELECT line, raw,
           CASE WHEN strpos(raw, '"') = 0 THEN string_split(raw, $delim)
                WHEN regexp_full_match(raw, $quoted_line)
                THEN list_transform(regexp_extract_all(raw, $quoted_field, 1),
                         lambda x: CASE WHEN x[1] = '"' THEN replace(x[2:-2], '""', '"')
                                        ELSE x END)
           END AS f
    FROM lines
),
fields AS (
    SELECT line, raw,
           CASE WHEN list_contains($not_utf8_lines, line)
                THEN $not_utf8_reasons[list_position($not_utf8_lines, line)]
                WHEN line = $open_line AND f IS NULL
                THEN 'truncated last line (a quoted field is not closed, no line end)'
                WHEN line = $open_line AND len(f) < $n_fields
                THEN 'truncated last line (' || len(f) || ' of ' || $n_fields
                     || ' fields, no line end)'
                WHEN f IS NULL THEN 'a quoted field is not closed'
                WHEN len(f) <> $n_fields AND NOT (len(f) = $n_fields + 1 AND f[-1] = '')
                THEN len(f) || ' fields where the header has ' || $n_fields
           END AS shape_error,
           {time_text} AS time_text,
           {field_texts}
    FROM split
),
typed AS (
    SELECT line, raw, shape_error, time_text, {numbers}
    FROM fields
),
{time_ctes},
shifted AS (
    SELECT *,
           CASE WHEN time_error IS NULL AND shape_error IS NULL
                     AND NOT (ts_shifted >= TIMESTAMPTZ '1678-01-01 00:00:00+00'
                              AND ts_shifted < TIMESTAMPTZ '2262-01-01 00:00:00+00')
                THEN 'time ''' || time_text || ''' is outside the years 1678 to 2261 '
                     || '(a two-digit year read as four digits, or a logger clock reset?)'
           END AS range_error
    FROM (SELECT *,
                 make_timestamptz(epoch_us(ts) - $label_shift_min::BIGINT * 60000000)
                     AS ts_shifted
          FROM timed)
)
SELECT line,
       CASE WHEN range_error IS NULL THEN ts_shifted END AS ts,
       {values},
       reason,
       CASE WHEN reason IS NOT NULL THEN raw END AS raw,  -- ingest_raw.sql fills in the rest
       true AS loaded  -- set false for the lines in _ingest_outcome before storing
FROM (SELECT *,
             coalesce(shape_error, time_error, range_error,
                      CASE WHEN {any_bad}
                           THEN nullif(concat_ws('; ', {value_errors}), '') END) AS reason
      FROM shifted);
