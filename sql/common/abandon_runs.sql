{{/* Run by StartRun, which holds the study's lock, in the transaction that
     inserts the new run: any run of the study still marked running was
     left so by a process that died (killed, out of memory, lost its
     connection before FailRun). Its finished_at stays NULL: when it
     stopped is unknown, and the start of the next run would invent a
     duration. $1 study, $2 the new run's id, $3 message. */ -}}
UPDATE {{.Runs}}
SET status = 'abandoned',
    message = CASE WHEN message IS NULL OR message = '' THEN $3 ELSE message || '; ' || $3 END
WHERE study = $1 AND status = 'running' AND run_id <> $2
