UPDATE analyses SET is_current = (analysis_id = $id)
