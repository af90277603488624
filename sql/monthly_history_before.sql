-- The history rows of a site before a month, newest first (for the trend).
SELECT month, epi, pr, status
FROM history
WHERE site = $site AND month < $month
ORDER BY month DESC
LIMIT $n;
