SELECT count(*)
FROM pg_catalog.pg_views
WHERE schemaname = $1 AND viewname = $2
