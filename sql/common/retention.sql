{{/* Deletes from .Table the rows of runs outside the newest $2 runs.
     Never deleted: the run being published ($1) and the latest succeeded
     run, which the current views show. Run for the child tables first and
     for the runs table last. */ -}}
DELETE FROM {{.Table}}
WHERE run_id IN (
    SELECT r.run_id
    FROM {{.Runs}} r
    WHERE r.run_id <> $1
      AND r.run_id NOT IN (
          SELECT run_id FROM {{.Runs}}
          ORDER BY started_at DESC, run_id DESC
          LIMIT $2)
      AND r.run_id NOT IN (
          SELECT run_id FROM {{.Runs}}
          WHERE status = 'succeeded'
          ORDER BY finished_at DESC, run_id DESC
          LIMIT 1)
)
