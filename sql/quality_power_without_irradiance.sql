-- power_without_irradiance: AC power above $power_share of the rating while the sun is below
-- the horizon, or while the site irradiance covering the same instant (POA where a POA sensor
-- is logged, else GHI) is below $irradiance_floor W/m2.
INSERT INTO flags
WITH pick AS (
    SELECT CASE WHEN count(*) FILTER (WHERE quantity = 'poa_wm2' AND device = 'site') > 0
                THEN 'poa_wm2' ELSE 'ghi_wm2' END AS quantity
    FROM _quality_channels
),
irr AS (
    SELECT r.ts, r.quantity, r.value, c.interval_min
    FROM readings r
    JOIN _quality_channels c USING (channel_id)
    WHERE r.device = 'site' AND r.quantity = (SELECT quantity FROM pick)
),
p AS (
    SELECT r.ts, r.device, r.value, c.interval_min
    FROM readings r
    JOIN _quality_channels c USING (channel_id)
    WHERE r.quantity = 'ac_power_w' AND r.value > $power_share * c.rating_w
),
j AS (
    SELECT p.*, i.quantity AS irr_quantity,
           CASE WHEN i.ts + to_minutes(i.interval_min) > p.ts THEN i.value END AS irr
    FROM p ASOF LEFT JOIN irr i ON i.ts <= p.ts
)
SELECT j.ts, 'ac_power_w', j.device, 'power_without_irradiance',
       CASE WHEN s.elevation_deg < 0
            THEN printf('%.0f W with the sun %.1f deg below the horizon', j.value,
                        -s.elevation_deg)
            ELSE printf('%.0f W with %s %.1f W/m2', j.value, j.irr_quantity, j.irr) END
FROM j
LEFT JOIN _quality_sun s ON s.ts = j.ts AND s.interval_min = j.interval_min
WHERE s.elevation_deg < 0 OR j.irr < $irradiance_floor;
