-- The wide table of one logger (its id is an integer chosen by the ingest, never user text),
-- and one column per channel it carries: <add_columns> is one
-- "ALTER TABLE logger_rows_<id> ADD COLUMN IF NOT EXISTS c<channel_id> DOUBLE" per channel.
-- Statements are separated by lines holding only ';'.
CREATE TABLE IF NOT EXISTS logger_rows_{logger_id} (
    ts      TIMESTAMPTZ NOT NULL,     -- UTC, interval start
    file_id INTEGER NOT NULL,
    line    INTEGER NOT NULL          -- line number in the file, from 1
)
;
{add_columns}
