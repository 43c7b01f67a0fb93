{{/* The final state of a run, written in the publish transaction.
     Only a running run can be finished, so a run is published once;
     an empty cohort fingerprint keeps the one StartRun wrote. */ -}}
UPDATE {{.Runs}}
SET status = $2,
    finished_at = $3,
    cohort_fingerprint = COALESCE($4, cohort_fingerprint),
    counts = $5,
    model = $6,
    balance = $7,
    effects = $8,
    message = $9,
    summary = $10
WHERE run_id = $1 AND status = 'running'
