-- First and last aligned instant (for a check over all the data).
SELECT min(ts) AS first_ts, max(ts) AS last_ts FROM aligned
