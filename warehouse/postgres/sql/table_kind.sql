{{/* The kind of relation $1.$2 is: 'p' a partitioned table, 'r' a plain
     one; no row when it does not exist. The publishing transaction reads
     it to tell a study's run tables created by this version (one
     partition per run) from those of an earlier one (plain). */ -}}
SELECT CAST(c.relkind AS text)
FROM pg_catalog.pg_class c
JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace
WHERE n.nspname = $1 AND c.relname = $2
