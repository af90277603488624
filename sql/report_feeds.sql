-- Per channel (quantity, device): its readings in the period [$start, $end) and the instant
-- of its last reading before $end (NULL: it never reported before the period's end). Only
-- the channels silent in the period are looked for before it.
WITH inside AS (
    SELECT quantity, device, count(*) AS readings, max(ts) AS last_ts
    FROM readings
    WHERE ts >= $start AND ts < $end
    GROUP BY quantity, device
), silent AS (
    SELECT quantity, device FROM channels
    ANTI JOIN inside USING (quantity, device)
), before AS (
    SELECT quantity, device, max(ts) AS last_ts
    FROM readings
    SEMI JOIN silent USING (quantity, device)
    WHERE ts < $start
    GROUP BY quantity, device
)
SELECT c.quantity, c.device, coalesce(i.readings, 0) AS readings,
       coalesce(i.last_ts, b.last_ts) AS last_ts
FROM channels c
LEFT JOIN inside i USING (quantity, device)
LEFT JOIN before b USING (quantity, device)
ORDER BY c.quantity, c.device;
