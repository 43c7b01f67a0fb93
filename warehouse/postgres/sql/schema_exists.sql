SELECT count(*)
FROM pg_catalog.pg_namespace
WHERE nspname = $1
