-- The instants with a stored value of any of the channels $ids, once each, in time order: the
-- instants of channel_values for those channels, read from the wide logger tables without
-- unpivoting them. <unions> is one
-- "UNION ALL SELECT ts FROM logger_rows_<id> WHERE c<a> IS NOT NULL OR c<b> IS NOT NULL ..."
-- per logger table carrying one of the channels (integers only).
SELECT DISTINCT ts
FROM (SELECT ts FROM reading_values WHERE list_contains($ids, channel_id)
      {unions})
ORDER BY ts
