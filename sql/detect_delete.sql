-- Events of an earlier run over the same period.
DELETE FROM events WHERE period_start = $period_start AND period_end = $period_end;
