SELECT count(*)
FROM duckdb_schemas()
WHERE database_name = current_database() AND schema_name = $1
