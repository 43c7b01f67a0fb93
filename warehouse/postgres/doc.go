// Package postgres is the Postgres engine of counterpart's warehouse
// contract (see warehouse/README.md). It reads the analyst's cohort query in
// a read-only transaction and decodes the wire values straight into the
// columnar warehouse.Cohort, publishes a run's rows with COPY inside one
// transaction, and keeps one run per study at a time with a session-level
// advisory lock.
//
// It talks to the server through github.com/jackc/pgx/v5 on one dedicated
// connection per Warehouse. Connection strings are parsed by pgconn, which
// honours the libpq environment variables (PGHOST, PGUSER, PGPASSWORD, ...)
// and the .pgpass file.
//
// It must not: write anything outside the study's output schema, create
// that schema, interpolate a value into SQL text (values are bound or
// streamed through COPY; identifiers are validated and quoted), or let a
// password reach an error message, a table or a log line.
package postgres
