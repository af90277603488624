-- out_of_range: a value outside the physically possible range of its quantity. Fixed ranges and
-- rating-scaled ranges come from _quality_channels (lo, hi; NULL: no limit). Irradiance upper
-- limits follow the sun, BSRN physically possible limits (Long & Dutton 2002, from memory):
-- GHI < Sa*1.5*mu0^1.2 + 100, DHI < Sa*0.95*mu0^1.2 + 50, DNI < Sa; for POA the GHI form
-- with the cosine at its maximum while the sun is up (a tilted plane can face the sun), for
-- the rear of a bifacial module too (it faces the sun at low sun). Only irradiance readings
-- join the sun.
INSERT INTO flags
WITH lim AS (
    SELECT r.ts, r.quantity, r.device, r.value, c.lo, c.hi
    FROM readings r
    JOIN _quality_channels c USING (channel_id)
    WHERE NOT list_contains($irradiance, r.quantity)
    UNION ALL
    SELECT r.ts, r.quantity, r.device, r.value, c.lo,
           CASE r.quantity
               WHEN 'ghi_wm2' THEN s.sa_wm2 * 1.5 * pow(s.mu0, 1.2) + 100
               WHEN 'dhi_wm2' THEN s.sa_wm2 * 0.95 * pow(s.mu0, 1.2) + 50
               WHEN 'dni_wm2' THEN s.sa_wm2
               WHEN 'poa_wm2' THEN s.sa_wm2 * 1.5 * (s.mu0 > 0)::INTEGER + 100
               WHEN 'poa_rear_wm2' THEN s.sa_wm2 * 1.5 * (s.mu0 > 0)::INTEGER + 100
               END AS hi
    FROM readings r
    JOIN _quality_channels c USING (channel_id)
    LEFT JOIN _quality_sun s ON s.ts = r.ts AND s.interval_min = c.interval_min
    WHERE list_contains($irradiance, r.quantity)
)
SELECT ts, quantity, device, 'out_of_range',
       printf('%.6g is outside %s to %s', value,
              coalesce(printf('%.6g', lo), 'no limit'), coalesce(printf('%.6g', hi), 'no limit'))
FROM lim
WHERE value < lo OR value > hi;
