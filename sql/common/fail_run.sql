{{/* Only a running run can fail: a published run keeps its status. */ -}}
UPDATE {{.Runs}}
SET status = 'failed',
    finished_at = $2,
    message = $3
WHERE run_id = $1 AND status = 'running'
