-- The number of aligned rows between $start and $end (end exclusive): perfcheck.align.load_aligned
-- allocates its columns whole before it fetches them (sql/align_load).
SELECT count(*) FROM aligned
WHERE ts >= $start AND ts < $end;
