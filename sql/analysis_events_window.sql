-- The events of analysis $id that touch [$start, $end), with their energy over that window
-- summed from the ledger entries (kWh).
SELECT e.*,
       coalesce((SELECT fsum(x.energy_wh) FROM analysis_entries x
                 WHERE x.analysis_id = e.analysis_id AND x.event_id = e.event_id
                   AND x.ts >= $start AND x.ts < $end), 0) / 1000.0 AS window_kwh
FROM analysis_events e
WHERE e.analysis_id = $id AND e.start_ts < $end AND e.end_ts > $start
ORDER BY e.start_ts, e.kind, e.scope
