-- Revisions recorded up to analysis $id of findings that touch [$start, $end).
SELECT * FROM analysis_revisions
WHERE analysis_id <= $id
  AND (coalesce(before_start, after_start) < $end)
  AND (coalesce(greatest(before_end, after_end), before_end, after_end) > $start)
ORDER BY analysis_id, coalesce(after_start, before_start), kind, scope
