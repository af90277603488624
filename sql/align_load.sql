-- Aligned rows of one site between $start and $end (end exclusive), in time order.
SELECT * FROM aligned
WHERE ts >= $start AND ts < $end
ORDER BY ts, inverter_id;
