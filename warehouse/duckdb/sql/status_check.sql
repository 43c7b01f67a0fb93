{{/* The CHECK constraint on the status column of a runs table, to bring
     one created before a status existed up to date. No row: no table. */ -}}
SELECT expression
FROM duckdb_constraints()
WHERE database_name = current_database() AND schema_name = $1 AND table_name = $2
  AND constraint_type = 'CHECK' AND expression LIKE '%status%'
