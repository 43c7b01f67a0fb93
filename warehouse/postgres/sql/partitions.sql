{{/* The partitions attached to the partitioned table $1.$2, by name. */ -}}
SELECT c.relname
FROM pg_catalog.pg_inherits i
JOIN pg_catalog.pg_class c ON c.oid = i.inhrelid
JOIN pg_catalog.pg_class p ON p.oid = i.inhparent
JOIN pg_catalog.pg_namespace n ON n.oid = p.relnamespace
WHERE n.nspname = $1 AND p.relname = $2
ORDER BY c.relname
