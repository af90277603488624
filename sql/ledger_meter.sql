-- The export meter against the inverters over [$start, $end) [kWh] (perfcheck.meter), over
-- the ledger rows that have an expected value: the inverters' energy; the AC losses (inverter
-- less meter where both exist); inverter energy the meter has no energy for; meter energy
-- where the inverters logged nothing (across logger gaps); the meter's energy; and the
-- inverters' energy where both exist (the base of the design AC loss); the meter's energy
-- spread in the expected shape over several intervals (ledger.delivered_shaped).
-- delivered = inverters - ac_losses - not_metered + without_inverter_data.
SELECT
    coalesce(fsum(measured_wh) FILTER (WHERE measured_wh IS NOT NULL), 0) / 1000.0,
    coalesce(fsum(measured_wh - delivered_wh)
             FILTER (WHERE measured_wh IS NOT NULL AND delivered_wh IS NOT NULL), 0) / 1000.0,
    coalesce(fsum(measured_wh)
             FILTER (WHERE measured_wh IS NOT NULL AND delivered_wh IS NULL), 0) / 1000.0,
    coalesce(fsum(delivered_wh)
             FILTER (WHERE measured_wh IS NULL AND delivered_wh IS NOT NULL), 0) / 1000.0,
    coalesce(fsum(delivered_wh), 0) / 1000.0,
    coalesce(fsum(measured_wh)
             FILTER (WHERE measured_wh IS NOT NULL AND delivered_wh IS NOT NULL), 0) / 1000.0,
    coalesce(fsum(delivered_wh) FILTER (WHERE delivered_shaped), 0) / 1000.0
FROM ledger
WHERE analysis_id = $id AND ts >= $start AND ts < $end AND expected_wh IS NOT NULL
