-- A fingerprint of the aligned series (an analysis input): rows, span and compensated sums of
-- measured and expected power, so any change of the model run or the readings changes it.
SELECT count(*), min(ts), max(ts), fsum(measured_ac_w), fsum(expected_ac_w) FROM aligned
