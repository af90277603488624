-- The tracker_angle channel (rotation of the first tracker array's rows) as stored: (ts, value).
SELECT ts, value FROM readings
WHERE quantity = 'tracker_angle_deg'
ORDER BY ts;
