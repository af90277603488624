-- Whether a tall file of naive local times is in time order, its devices' lines interleaving:
-- the lines of the repeated autumn hour change device more often than there are devices. Read
-- from _ingest_rows as first resolved (each device's lines apart); a file in time order is then
-- resolved again with all its lines as one pass (sql/ingest_time_local.sql), so that a device
-- seen only in the second pass (its first-pass values missing) is read in it.
SELECT count(*) FILTER (WHERE dev IS DISTINCT FROM prev) > count(DISTINCT dev)
FROM (SELECT dev, lag(dev) OVER (ORDER BY line) AS prev FROM _ingest_rows WHERE ambiguous)
