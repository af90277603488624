SELECT inputs_json FROM analyses WHERE analysis_id = $id
