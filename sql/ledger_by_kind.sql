-- Energy of the ledger entries of [$start, $end) by event kind [kWh].
SELECT e.kind, fsum(x.energy_wh) / 1000.0
FROM analysis_entries x
JOIN analysis_events e ON e.analysis_id = x.analysis_id AND e.event_id = x.event_id
WHERE x.analysis_id = $id AND x.ts >= $start AND x.ts < $end
GROUP BY e.kind
ORDER BY e.kind
