-- Drop aligned rows in [$start, $end) before they are rebuilt.
DELETE FROM aligned_base WHERE ts >= $start AND ts < $end;
