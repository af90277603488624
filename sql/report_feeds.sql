-- Per channel (quantity, device): its readings in the period [$start, $end) and the instant
-- of its last reading before $end (NULL: it never reported before the period's end).
SELECT c.quantity, c.device,
       count(r.ts) FILTER (WHERE r.ts >= $start) AS readings,
       max(r.ts) AS last_ts
FROM channels c
LEFT JOIN readings r ON r.quantity = c.quantity AND r.device = c.device AND r.ts < $end
GROUP BY c.quantity, c.device
ORDER BY c.quantity, c.device;
