{{/* Columns of an existing table, to add what a study gained and to catch
     type conflicts. */ -}}
SELECT column_name, data_type
FROM duckdb_columns()
WHERE database_name = current_database() AND schema_name = $1 AND table_name = $2
ORDER BY column_index
