{{/* Deletes from .Table the rows of the runs expired_runs.sql listed,
     bound as $1 … $n (.Params holds the placeholders). An explicit list,
     not a subquery over the runs table: the engine then filters the scan
     instead of joining, and DuckDB, which does not count the rows a
     transaction has just inserted, would otherwise build its join's hash
     table over the whole child table (it ran out of memory there at 2
     million units under warehouse-scale mode's memory cap). Run for the
     child tables first and for the runs table last. */ -}}
DELETE FROM {{.Table}}
WHERE run_id IN ({{.Params}})
