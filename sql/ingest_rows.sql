-- Split, type and check every data line of one file: one output row per non-empty input line,
-- with the instant (UTC, interval start), the values in SI units and, for a line that cannot be
-- read, the reason and the raw text. Placeholders in braces are filled by perfcheck.ingest with
-- sql/ingest_lines.sql and with expressions built from field positions and fixed unit factors
-- only; everything from the user's files (delimiter, sentinels, formats, column names, time
-- zone) arrives as a bound parameter. Instants are moved
-- as microseconds since 1970 (epoch_us, make_timestamptz): no time-zone arithmetic per row.
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
           CASE WHEN f IS NULL THEN 'a quoted field is not closed'
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
{time_ctes}
SELECT line,
       make_timestamptz(epoch_us(ts) - $label_shift_min::BIGINT * 60000000) AS ts,
       {values},
       reason,
       CASE WHEN reason IS NOT NULL THEN raw END AS raw,  -- ingest_raw.sql fills in the rest
       true AS loaded  -- set false for the lines in _ingest_outcome before storing
FROM (SELECT *,
             coalesce(shape_error, time_error,
                      CASE WHEN {any_bad}
                           THEN nullif(concat_ws('; ', {value_errors}), '') END) AS reason
      FROM timed);
