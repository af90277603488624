-- The ledger's measured and expected power [W] of [$start, $end), with the energy [Wh] that
-- clipping at the AC rating keeps out of the expected series and that curtailment events take.
WITH limits AS (
    SELECT x.ts, x.inverter_id,
           fsum(x.energy_wh) FILTER (WHERE e.kind = 'design_clipping') AS clipping_wh,
           fsum(x.energy_wh) FILTER (WHERE e.kind = 'curtailment') AS curtailment_wh
    FROM analysis_entries x
    JOIN analysis_events e ON e.analysis_id = x.analysis_id AND e.event_id = x.event_id
    WHERE x.analysis_id = $id AND x.ts >= $start AND x.ts < $end
      AND e.kind IN ('design_clipping', 'curtailment')
    GROUP BY x.ts, x.inverter_id
)
SELECT l.ts, l.inverter_id, l.measured_wh * 3600.0 / l.interval_s AS measured_ac_w,
       l.expected_wh * 3600.0 / l.interval_s AS expected_ac_w,
       coalesce(m.clipping_wh, 0.0) AS clipping_wh,
       coalesce(m.curtailment_wh, 0.0) AS curtailment_wh
FROM ledger l
LEFT JOIN limits m ON m.ts = l.ts AND m.inverter_id = l.inverter_id
WHERE l.analysis_id = $id AND l.ts >= $start AND l.ts < $end
