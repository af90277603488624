SELECT model_json, degradation_json FROM analyses WHERE analysis_id = $id
