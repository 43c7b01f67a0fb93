{{/* Who holds the advisory lock of a study: pg_advisory_lock(bigint) keys
     show in pg_locks as classid = high 32 bits, objid = low 32 bits,
     objsubid = 1 (PostgreSQL manual, "pg_locks"). $1, $2: the two halves as
     oid values; the holder is any other granted session on this database. */ -}}
SELECT l.pid, COALESCE(a.application_name, ''), COALESCE(host(a.client_addr), 'local socket'),
       COALESCE(to_char(a.backend_start AT TIME ZONE 'UTC', 'YYYY-MM-DD"T"HH24:MI:SS"Z"'), '')
FROM pg_catalog.pg_locks l
LEFT JOIN pg_catalog.pg_stat_activity a ON a.pid = l.pid
WHERE l.locktype = 'advisory' AND l.granted
  AND l.database = (SELECT oid FROM pg_catalog.pg_database WHERE datname = current_database())
  AND l.classid = $1 AND l.objid = $2 AND l.objsubid = 1
  AND l.pid <> pg_backend_pid()
LIMIT 1
