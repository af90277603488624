-- Aligned rows of run $id for interval starts in [$start, $end): expected beside the measured
-- power in _measured (registered by perfcheck.align), with the sun and weather of the interval
-- as the model used them. $iv interval [s].
INSERT INTO aligned_base BY NAME
WITH e AS (
    SELECT * FROM expected WHERE model_run_id = $id AND ts >= $start AND ts < $end
)
SELECT coalesce(e.ts, m.ts) AS ts, coalesce(e.inverter_id, m.inverter_id) AS inverter_id,
       $iv AS interval_s, $id AS model_run_id,
       m.measured_ac_w, e.ac_w AS expected_ac_w, e.ac_potential_w AS potential_ac_w,
       e.dc_w AS expected_dc_w, e.poa_global_wm2 AS poa_wm2, e.poa_modelled_wm2,
       e.poa_source, e.temp_cell_c, e.ac_modelled_w AS expected_ac_modelled_w,
       e.ac_potential_modelled_w AS potential_ac_modelled_w, e.temp_cell_modelled_c,
       e.poa_dni_sensitivity_wm2, e.poa_beam_range_wm2,
       e.ghi_wm2, e.temp_air_c, e.wind_speed_ms, e.temp_module_c, e.rain_mm, e.poa_sensor_wm2,
       e.sun_zenith_deg, e.sun_azimuth_deg, e.clearsky_ghi_wm2
FROM e FULL JOIN _measured m ON m.ts = e.ts AND m.inverter_id = e.inverter_id;
