-- Only the current analysis keeps its ledger, entries and daily sums; earlier ones keep their
-- record and events (for the revisions).
DELETE FROM ledger;
DELETE FROM analysis_entries;
DELETE FROM analysis_daily;
