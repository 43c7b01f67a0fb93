{{/* The CHECK constraint on the status column of a runs table ($1 schema,
     $2 table), to bring one created before a status existed up to date.
     No row: no table (or no such constraint). */ -}}
SELECT con.conname, pg_catalog.pg_get_constraintdef(con.oid)
FROM pg_catalog.pg_constraint con
JOIN pg_catalog.pg_class c ON c.oid = con.conrelid
JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace
WHERE n.nspname = $1 AND c.relname = $2 AND con.contype = 'c'
  AND pg_catalog.pg_get_constraintdef(con.oid) LIKE '%status%'
LIMIT 1
