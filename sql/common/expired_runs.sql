{{/* The runs that retention deletes. keep_runs ($2, 0: no limit) counts
     succeeded runs only: those outside the newest $2 of them expire.
     Runs that did not succeed (failed, rejected, cancelled, abandoned,
     skipped) expire by age instead: started before $3 (NULL: never), so
     that crashed nights cannot push out the succeeded runs. Never listed:
     the run being published ($1), any run still running, and the latest
     succeeded run, which the current views show. It reads only the runs
     table, so the engine plans it over a few hundred rows; retention.sql
     then deletes by the explicit list. */ -}}
SELECT r.run_id
FROM {{.Runs}} r
WHERE r.run_id <> $1
  AND r.status <> 'running'
  AND (
      (r.status = 'succeeded' AND $2 > 0 AND r.run_id NOT IN (
          SELECT run_id FROM {{.Runs}}
          WHERE status = 'succeeded'
          ORDER BY started_at DESC, run_id DESC
          LIMIT $2))
      OR (r.status <> 'succeeded' AND r.started_at < CAST($3 AS TIMESTAMPTZ)))
  AND r.run_id NOT IN (
      SELECT run_id FROM {{.Runs}}
      WHERE status = 'succeeded'
      ORDER BY finished_at DESC, run_id DESC
      LIMIT 1)
ORDER BY r.run_id
