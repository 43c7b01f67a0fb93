{{/* Run by StartRun, which holds the study's lock, in the transaction that
     inserts the new run: any run of the study still marked running was
     left so by a process that died (killed, out of memory, lost its
     connection before FailRun). $1 study, $2 the new run's id, $3 finish
     time, $4 message. */ -}}
UPDATE {{.Runs}}
SET status = 'abandoned',
    finished_at = $3,
    message = CASE WHEN message IS NULL OR message = '' THEN $4 ELSE message || '; ' || $4 END
WHERE study = $1 AND status = 'running' AND run_id <> $2
