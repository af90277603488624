-- channel_values over reading_values and the wide logger tables: <unions> is one
-- "SELECT ts, <channel_id>::SMALLINT, c<channel_id>, file_id, line FROM logger_rows_<id>
--  WHERE c<channel_id> IS NOT NULL" per row of logger_channels (integers only).
CREATE OR REPLACE VIEW channel_values AS
SELECT ts, channel_id, value, file_id, line FROM reading_values
UNION ALL
{unions}
