-- Status column k of one file (run inside the file's transaction): the codes not seen before
-- get the next ids in status_texts, then each row's value v<k> is its code's id. t<k> is the
-- code as written (trimmed; NULL when empty or a sentinel). Statements are separated by lines
-- holding only ';'; <k> is an integer put in by perfcheck.ingest.
INSERT INTO status_texts
SELECT (SELECT coalesce(max(code_id), 0) FROM status_texts) + row_number() OVER (ORDER BY code),
       code
FROM (SELECT DISTINCT t{k} AS code FROM _ingest_rows WHERE t{k} IS NOT NULL) n
WHERE code NOT IN (SELECT code FROM status_texts)
;
UPDATE _ingest_rows SET v{k} = s.code_id
FROM status_texts s
WHERE s.code = _ingest_rows.t{k}
