-- Irradiance-weighted mean cell temperature over daylight rows with irradiance and cell
-- temperature, in [$start, $end): T_cell_typ_avg of Dierauf et al. 2013 (NREL/TP-5200-57991).
SELECT fsum(poa_wm2 * temp_cell_c * interval_s) / fsum(poa_wm2 * interval_s) AS t_cell_typ_avg_c,
       min(ts) AS first_ts, max(ts) AS last_ts
FROM aligned
WHERE ts >= $start AND ts < $end AND sun_zenith_deg < 90
  AND poa_wm2 > 0 AND temp_cell_c IS NOT NULL
