-- Daily sums per inverter over the aligned rows: the only pass over interval data that the
-- metrics need (perfcheck.metrics.daily_sums). Everything after this works on these sums.
-- Parameters: $tz (site zone, for day boundaries), $start, $end (end exclusive), $min_poa and
-- $avail_min_poa [W/m2], $exclude_flags (flag names that make a row invalid), $analysis (the
-- analysis whose ledger gives the measured power (NULL: the aligned readings): readings with clock faults shifted back, so
-- a fault of the data never counts as downtime; and the ledger's measured and expected energy
-- over the intervals that have both, the one "measured" and "expected" of every view).
-- $basis: 'inverter' (the inverters' energy) or 'meter' (the export meter's energy shared over
-- the rows, ledger.delivered_wh, and the expected power times $meter_factor, the share that
-- reaches the meter by design: perfcheck.meter). e_delivered_wh and the reconciliation sums
-- e_rec_inv_wh / e_rec_meter_wh (the inverters' and the meter's energy over the rows that
-- have both) come from the ledger in either basis.
-- Registered relations: _metrics_inverters(inverter_id, down_w) and
-- _metrics_windows(action, scope, start_ts, end_ts) from detected events: action 'exclude'
-- (curtailment / grid outage) or 'model_poa' (suspect irradiance sensor: there the
-- irradiance, the expected power and the cell temperature come from the modelled POA,
-- poa_modelled_wm2, expected_ac_modelled_w, temp_cell_modelled_c, and the rows are counted
-- as fallback).
-- Rules: a row is daylight when the sun is above the horizon; valid when measured power,
-- expected power and plane-of-array irradiance are present and it carries none of the excluded
-- flags; used (for yields, PR, EPI) when daylight, valid, outside the exclusion windows and its
-- irradiance is at least $min_poa; in the availability base when daylight, valid, outside the
-- windows and its irradiance is at least $avail_min_poa. Energy sums are in Wh, irradiation in
-- Wh/m2, irradiation times cell temperature in Wh/m2*C (h_t, ht: cell temperature, for the
-- weather-corrected PR; h_tb, htb: the temperature of $temp_basis, for the
-- temperature-corrected PR; h_dni: the modelled irradiance's sensitivity to the decomposition's
-- DNI over the rows without the sensor's reading; h_beam: its range over the beam the
-- decomposition cannot see at low sun, the same rows). Sums are compensated (fsum), so they do
-- not depend on the order in which DuckDB's threads add the rows: a re-run from an evidence
-- bundle must reproduce every digit.
WITH dc AS (
    SELECT ts, device, value AS dc_w FROM readings WHERE quantity = 'dc_power_w'
),
-- the windows a row falls in: one range join that yields only the rows inside a window (a
-- correlated EXISTS per action would materialise every aligned row, twice)
inw AS (
    SELECT a.ts, a.inverter_id, bool_or(x.action = 'exclude') AS excluded,
           bool_or(x.action = 'model_poa') AS model_poa
    FROM aligned_base a
    JOIN _metrics_windows x
      ON a.ts >= x.start_ts AND a.ts < x.end_ts
     AND (x.scope = 'plant' OR x.scope = 'inverter:' || a.inverter_id)
    WHERE a.ts >= $start AND a.ts < $end
    GROUP BY a.ts, a.inverter_id
),
w AS (
    SELECT a.ts, a.inverter_id, a.interval_s, a.measured_ac_w, a.expected_ac_w, a.poa_wm2,
           a.poa_modelled_wm2, a.poa_source, a.temp_module_c, a.temp_cell_c, a.sun_zenith_deg,
           a.flags, a.expected_ac_modelled_w, a.temp_cell_modelled_c, a.poa_dni_sensitivity_wm2,
           a.poa_beam_range_wm2,
           coalesce(inw.excluded, false) AS excluded,
           a.poa_modelled_wm2 IS NOT NULL AND a.expected_ac_modelled_w IS NOT NULL
               AND coalesce(inw.model_poa, false) AS fallback
    FROM aligned a
    LEFT JOIN inw ON inw.ts = a.ts AND inw.inverter_id = a.inverter_id
    WHERE a.ts >= $start AND a.ts < $end
),
l AS (
    SELECT ts, inverter_id, measured_wh, expected_wh, poa_wm2, delivered_wh FROM ledger
    WHERE analysis_id = $analysis AND ts >= $start AND ts < $end
),
-- with an analysis, an inverter is down in the intervals the ledger gives to a kind of
-- downtime ($downtime_kinds: outage), so availability and the outage events agree; a low
-- output that the analysis explains otherwise (a shaded array, a fault of the data) is not
-- downtime
down AS (
    SELECT DISTINCT x.ts, x.inverter_id
    FROM analysis_entries x
    JOIN analysis_events e ON e.analysis_id = x.analysis_id AND e.event_id = x.event_id
    WHERE x.analysis_id = $analysis AND x.ts >= $start AND x.ts < $end
      AND list_contains($downtime_kinds, e.kind)
),
r AS (
    SELECT
        w.ts,
        w.inverter_id,
        CAST(timezone($tz, w.ts) AS DATE) AS day,
        w.interval_s,
        w.interval_s / 3600.0 AS dt_h,
        m.wh * 3600.0 / w.interval_s AS p,
        CASE WHEN m.wh IS NOT NULL AND m.exp_wh IS NOT NULL THEN m.wh END AS lm_wh,
        CASE WHEN m.wh IS NOT NULL AND m.exp_wh IS NOT NULL THEN m.exp_wh END AS le_wh,
        CASE WHEN w.fallback THEN w.expected_ac_modelled_w * m.f
             ELSE m.exp_wh * 3600.0 / w.interval_s END AS p_exp,
        l.delivered_wh AS d_wh,
        CASE WHEN l.measured_wh IS NOT NULL AND l.delivered_wh IS NOT NULL
                  AND l.expected_wh IS NOT NULL THEN l.measured_wh END AS rec_inv_wh,
        CASE WHEN l.measured_wh IS NOT NULL AND l.delivered_wh IS NOT NULL
                  AND l.expected_wh IS NOT NULL THEN l.delivered_wh END AS rec_meter_wh,
        l.expected_wh IS NOT NULL AS has_exp,
        CASE WHEN w.fallback THEN w.poa_modelled_wm2 ELSE m.poa END AS g,
        CASE WHEN w.fallback THEN coalesce(w.temp_cell_modelled_c, w.temp_cell_c)
             ELSE w.temp_cell_c END AS t,
        w.temp_module_c AS t_mod,
        w.poa_dni_sensitivity_wm2 AS g_dni,
        w.poa_beam_range_wm2 AS g_beam,
        i.delta_t_c,
        coalesce(w.poa_source = 'sensor', false) AND NOT w.fallback AS sensor,
        w.fallback,
        w.excluded,
        coalesce(w.sun_zenith_deg < 90, false) AS daylight,
        m.wh IS NOT NULL AND (m.exp_wh IS NOT NULL OR w.fallback)
            AND (m.poa IS NOT NULL OR w.fallback)
            AND (coalesce(w.flags, '') = ''
                 OR NOT list_has_any(string_split(w.flags, ','), $exclude_flags)) AS valid,
        CASE WHEN l.ts IS NULL THEN m.wh * 3600.0 / w.interval_s < i.down_w
             ELSE dn.ts IS NOT NULL END AS is_down
    FROM w
    JOIN _metrics_inverters i ON i.inverter_id = w.inverter_id
    LEFT JOIN l ON l.ts = w.ts AND l.inverter_id = w.inverter_id
    LEFT JOIN down dn ON dn.ts = w.ts AND dn.inverter_id = w.inverter_id
    -- measured and expected energy and plane irradiance: the ledger's (clock faults shifted
    -- back, sensor faults rebuilt); without a ledger (no analysis yet) the aligned values
    CROSS JOIN LATERAL (SELECT
        CASE WHEN l.ts IS NULL THEN w.poa_wm2 ELSE l.poa_wm2 END AS poa,
        CASE WHEN $basis = 'meter' THEN l.delivered_wh
             WHEN l.ts IS NULL THEN w.measured_ac_w * w.interval_s / 3600.0
             ELSE l.measured_wh END AS wh,
        CASE WHEN $basis = 'meter' THEN $meter_factor ELSE 1.0 END AS f) mf
    CROSS JOIN LATERAL (SELECT mf.poa, mf.wh, mf.f,
        mf.f * CASE WHEN l.ts IS NOT NULL THEN l.expected_wh
             WHEN w.fallback THEN w.expected_ac_modelled_w * w.interval_s / 3600.0
             ELSE w.expected_ac_w * w.interval_s / 3600.0 END AS exp_wh) m
),
u AS (
    SELECT *,
        daylight AND valid AND NOT excluded AND g >= $min_poa AS used,
        daylight AND valid AND NOT excluded AND g >= $avail_min_poa AS base,
        -- the temperature of the temperature-corrected PR ($temp_basis): the measured module
        -- temperature (IEC 61724-1), else the cell temperature less the SAPM back-to-cell
        -- difference delta_t_c G/1000 (King et al. 2004, eq. 12); or the cell temperature
        CASE WHEN $temp_basis = 'module' THEN coalesce(t_mod, t - delta_t_c * g / 1000.0)
             ELSE t END AS tb
    FROM r
),
-- the measured DC energy of the used rows, per day: their keys alone joined with the DC
-- readings (joined to the rows themselves, the DC readings took a hash table of every row
-- with all its columns, a third of this query's time, on sites without a DC channel too)
dcs AS (
    SELECT u.day, u.inverter_id, count(dc.dc_w) AS n_dc,
           coalesce(fsum(dc.dc_w * u.dt_h), 0) AS e_dc_wh
    FROM u JOIN dc ON dc.ts = u.ts AND dc.device = u.inverter_id
    WHERE u.used
    GROUP BY u.day, u.inverter_id
)
SELECT
    day,
    inverter_id,
    mode(interval_s) AS interval_s,
    count(*) FILTER (WHERE daylight) AS n_daylight,
    count(*) FILTER (WHERE daylight AND valid) AS n_valid,
    count(*) FILTER (WHERE daylight AND valid AND excluded) AS n_excluded,
    count(*) FILTER (WHERE used) AS n_used,
    count(*) FILTER (WHERE used AND fallback) AS n_fallback,
    coalesce(any_value(dcs.n_dc), 0) AS n_dc,
    coalesce(fsum(p * dt_h) FILTER (WHERE used), 0) AS e_meas_wh,
    coalesce(fsum(p_exp * dt_h) FILTER (WHERE used), 0) AS e_exp_wh,
    coalesce(fsum(p_exp * dt_h) FILTER (WHERE used AND fallback), 0) AS e_exp_fallback_wh,
    coalesce(any_value(dcs.e_dc_wh), 0) AS e_dc_wh,
    coalesce(fsum(g * dt_h) FILTER (WHERE used), 0) AS h_whm2,
    coalesce(fsum(g * dt_h) FILTER (WHERE used AND sensor), 0) AS h_sensor_whm2,
    coalesce(fsum(g_dni * dt_h) FILTER (WHERE used AND NOT sensor), 0) AS h_dni_whm2,
    coalesce(fsum(g_beam * dt_h) FILTER (WHERE used AND NOT sensor), 0) AS h_beam_whm2,
    coalesce(fsum(g * dt_h) FILTER (WHERE used AND t IS NOT NULL), 0) AS h_t_whm2,
    coalesce(fsum(g * t * dt_h) FILTER (WHERE used AND t IS NOT NULL), 0) AS ht_whm2c,
    coalesce(fsum(g * dt_h) FILTER (WHERE used AND tb IS NOT NULL), 0) AS h_tb_whm2,
    coalesce(fsum(g * tb * dt_h) FILTER (WHERE used AND tb IS NOT NULL), 0) AS htb_whm2c,
    count(*) FILTER (WHERE base) AS n_base,
    count(*) FILTER (WHERE base AND NOT is_down) AS n_up,
    coalesce(fsum(p_exp * dt_h) FILTER (WHERE base), 0) AS e_base_exp_wh,
    coalesce(fsum(p_exp * dt_h) FILTER (WHERE base AND is_down), 0) AS e_down_exp_wh,
    coalesce(fsum(p * dt_h) FILTER (WHERE daylight AND valid), 0) AS e_meas_all_wh,
    coalesce(fsum(p_exp * dt_h) FILTER (WHERE daylight AND valid), 0) AS e_exp_all_wh,
    coalesce(fsum(p_exp * dt_h) FILTER (WHERE daylight AND NOT valid), 0) AS e_exp_gap_wh,
    coalesce(fsum(lm_wh), 0) AS e_ledger_meas_wh,
    coalesce(fsum(le_wh), 0) AS e_ledger_exp_wh,
    coalesce(fsum(d_wh) FILTER (WHERE has_exp), 0) AS e_delivered_wh,
    coalesce(fsum(rec_inv_wh), 0) AS e_rec_inv_wh,
    coalesce(fsum(rec_meter_wh), 0) AS e_rec_meter_wh
FROM u
LEFT JOIN dcs USING (day, inverter_id)
GROUP BY day, inverter_id
ORDER BY day, inverter_id
