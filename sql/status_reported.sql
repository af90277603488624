-- Every stored status reading with the code the logger wrote: (ts, device, code).
SELECT r.ts, r.device, s.code
FROM readings r
JOIN status_texts s ON s.code_id = r.value
WHERE r.quantity = 'status_code'
ORDER BY r.device, r.ts;
