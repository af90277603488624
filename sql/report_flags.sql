-- Quality flags in the period [$start, $end), counted by flag, quantity and device.
SELECT flag, quantity, device, count(*) AS rows_flagged
FROM flags
WHERE ts >= $start AND ts < $end
GROUP BY flag, quantity, device
ORDER BY rows_flagged DESC, flag, quantity, device;
