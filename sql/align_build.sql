-- Aligned rows of model run {id}: the expected rows in _expected (a piece of the model's
-- output under the aligned names, with the sun and weather of each interval as the model used
-- them; perfcheck.align.store) beside the measured power in _measured. {iv} interval [s].
-- Not sorted: the aligned view's join with the flags does not keep an order, so
-- perfcheck.align.load_aligned puts what it reads in time order anyway (a sort here took a
-- third of each piece's time).
INSERT INTO aligned_base BY NAME
SELECT coalesce(e.ts, m.ts) AS ts, coalesce(e.inverter_id, m.inverter_id) AS inverter_id,
       {iv} AS interval_s, {id} AS model_run_id, m.measured_ac_w,
       e.* EXCLUDE (ts, inverter_id)
FROM _expected e FULL JOIN _measured m ON m.ts = e.ts AND m.inverter_id = e.inverter_id;
