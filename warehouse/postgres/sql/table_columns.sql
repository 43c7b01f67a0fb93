{{/* Columns of an existing table, to add what a study gained and to catch
     type conflicts. format_type gives the names the engine's type map uses
     (text, bigint, double precision, boolean, timestamp with time zone,
     jsonb). */ -}}
SELECT a.attname, pg_catalog.format_type(a.atttypid, NULL)
FROM pg_catalog.pg_attribute a
JOIN pg_catalog.pg_class c ON c.oid = a.attrelid
JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace
WHERE n.nspname = $1 AND c.relname = $2 AND c.relkind IN ('r', 'p')
  AND a.attnum > 0 AND NOT a.attisdropped
ORDER BY a.attnum
