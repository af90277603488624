-- Events of an analysis that start before $before, their energy summed from the entries
-- before it (so a later analysis is compared on the history both have seen). Events of an
-- analysis whose entries are gone keep their stored energy.
SELECT e.event_id, e.kind, e.scope, e.start_ts, least(e.end_ts, $before) AS end_ts,
       coalesce((SELECT fsum(x.energy_wh) / 1000.0 FROM analysis_entries x
                 WHERE x.analysis_id = e.analysis_id AND x.event_id = e.event_id
                   AND x.ts < $before), e.energy_kwh) AS energy_kwh
FROM analysis_events e
WHERE e.analysis_id = $id AND e.start_ts < $before
ORDER BY e.start_ts, e.kind, e.scope
