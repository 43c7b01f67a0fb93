{{/* The runs that retention deletes: those outside the newest $2 runs.
     Never listed: the run being published ($1) and the latest succeeded
     run, which the current views show. It reads only the runs table, so
     the engine plans it over a few hundred rows; retention.sql then
     deletes by the explicit list. */ -}}
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
ORDER BY r.run_id
