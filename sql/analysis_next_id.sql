SELECT nextval('analysis_id')
