-- Aligned rows of one site between $start and $end (end exclusive); {columns}: the columns
-- wanted, by name (perfcheck.align.load_aligned). load_aligned puts them in time order (a sort
-- here would keep its memory in DuckDB's pool).
SELECT {columns} FROM aligned
WHERE ts >= $start AND ts < $end;
