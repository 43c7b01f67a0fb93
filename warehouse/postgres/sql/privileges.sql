{{/* The first right the session lacks to publish in schema $1: USAGE or
     CREATE on the schema, then INSERT or DELETE on the existing tables
     whose names start with the study's prefix $2 (a partitioned run table
     as a whole: its partitions' rights are checked through it), then
     OWNERSHIP of the partitioned tables, which attaching and dropping a
     run's partition needs (membership in the owner role will do). No
     row: nothing missing. */ -}}
SELECT what, object FROM (
    SELECT 1 AS k, 'USAGE' AS what, $1 AS object
    WHERE NOT pg_catalog.has_schema_privilege($1, 'USAGE')
    UNION ALL
    SELECT 2, 'CREATE', $1
    WHERE NOT pg_catalog.has_schema_privilege($1, 'CREATE')
    UNION ALL
    SELECT 3, p.what, c.relname
    FROM pg_catalog.pg_class c
    JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace
    CROSS JOIN (VALUES ('INSERT'), ('DELETE')) AS p(what)
    WHERE n.nspname = $1 AND left(c.relname, length($2)) = $2 AND c.relkind IN ('r', 'p') AND NOT c.relispartition
      AND NOT pg_catalog.has_table_privilege(c.oid, p.what)
    UNION ALL
    SELECT 4, 'OWNERSHIP', c.relname
    FROM pg_catalog.pg_class c
    JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace
    WHERE n.nspname = $1 AND left(c.relname, length($2)) = $2 AND c.relkind = 'p'
      AND NOT pg_catalog.pg_has_role(c.relowner, 'USAGE')
) m
ORDER BY k, object, what
LIMIT 1
