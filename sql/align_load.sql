-- Aligned rows of one site between $start and $end (end exclusive); perfcheck.align.load_aligned
-- puts them in time order (a sort here would keep its memory in DuckDB's pool).
SELECT * FROM aligned
WHERE ts >= $start AND ts < $end;
