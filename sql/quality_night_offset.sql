-- night_offset: irradiance readings with the sun below $night_elevation degrees (no sunlight
-- reaches the sensor) whose magnitude exceeds the zero-offset allowance $night_offset_wm2 of
-- the sensor class (ISO 9060:2018 zero offset a, from memory).
INSERT INTO flags
SELECT r.ts, r.quantity, r.device, 'night_offset',
       printf('%.1f W/m2 at night (sun %.1f deg below the horizon); allowance +-%g W/m2',
              r.value, -s.elevation_deg, $night_offset_wm2)
FROM readings r
JOIN _quality_channels c USING (channel_id)
JOIN _quality_sun s ON s.ts = r.ts AND s.interval_min = c.interval_min
WHERE list_contains($irradiance, r.quantity)
  AND s.elevation_deg < $night_elevation
  AND abs(r.value) > $night_offset_wm2;
