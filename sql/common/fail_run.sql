{{/* Only a running run can fail or be cancelled ($4): a published run
     keeps its status. */ -}}
UPDATE {{.Runs}}
SET status = $4,
    finished_at = $2,
    message = $3
WHERE run_id = $1 AND status = 'running'
