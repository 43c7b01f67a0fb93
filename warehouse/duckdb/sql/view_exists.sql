SELECT count(*)
FROM duckdb_views()
WHERE database_name = current_database() AND schema_name = $1 AND view_name = $2
