-- The quantities that have a site channel (logged, or written as long rows).
SELECT quantity FROM channels WHERE device = 'site' ORDER BY quantity;
