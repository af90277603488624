-- The pass of a tall file's line in sql/ingest_time_local.sql: each device's lines apart, unless
-- the lines of the repeated hour change device more often than there are devices (the file is
-- in time order, interleaving its devices), when all lines are read as one pass. Only a tall
-- file needs this test; it reads the resolved lines a second time (a third more time to ingest
-- a 1-minute site-year of naive local times).
CASE WHEN (SELECT count(*) FILTER (WHERE dev IS DISTINCT FROM prev) > count(DISTINCT dev)
           FROM (SELECT dev, lag(dev) OVER (ORDER BY line) AS prev
                 FROM local_amb WHERE ambiguous))
     THEN NULL ELSE dev END
