-- Expected and measured AC energy per inverter and site-local month [kWh], with the plant
-- total ('plant'). The ratio uses the intervals where both exist; coverage is the share of the
-- expected energy that has a measurement. $tz: the site's IANA zone.
WITH e AS (
    SELECT inverter_id, strftime(timezone($tz, ts), '%Y-%m') AS month,
           expected_ac_w * interval_s / 3.6e6 AS expected_kwh,
           measured_ac_w * interval_s / 3.6e6 AS measured_kwh
    FROM aligned_base
)
SELECT coalesce(inverter_id, 'plant') AS inverter_id, month,
       fsum(expected_kwh) AS expected_kwh,
       fsum(measured_kwh) AS measured_kwh,
       fsum(measured_kwh) FILTER (WHERE expected_kwh IS NOT NULL)
         / nullif(fsum(expected_kwh) FILTER (WHERE measured_kwh IS NOT NULL), 0) AS ratio,
       fsum(expected_kwh) FILTER (WHERE measured_kwh IS NOT NULL)
         / nullif(fsum(expected_kwh), 0) AS coverage
FROM e
GROUP BY GROUPING SETS ((inverter_id, month), (month))
ORDER BY grouping(inverter_id), 1, month;
