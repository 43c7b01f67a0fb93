// Package duckdb is counterpart's DuckDB engine: it implements
// warehouse.Warehouse over one DuckDB database file.
//
// The file is opened per operation, not for the whole run (session.go):
// read-only for the cohort read, the warehouse-scale queries and the runs
// listings, read-write only to start, publish, fail or cancel a run, and
// closed in between, so that other processes can read the file while the
// run fits and matches. A file another process holds gives
// warehouse.ErrBusy, retried for OpenOptions.Wait. Within an operation one
// connection carries every statement, so a transaction and its bulk
// writes share it. The cohort query runs inside BEGIN TRANSACTION READ ONLY and is refused
// before it runs unless DuckDB prepares it as a single SELECT; the result is
// read a data chunk at a time (chunks.go), each column's vector decoded
// straight into the columnar warehouse.Cohort, about ten times faster than
// database/sql's row-at-a-time values (still the fallback). Publish
// writes every table through a table function over the columnar slices
// (bulk.go) inside one explicit transaction (a test checks that appended
// rows disappear on ROLLBACK). The per-study lock is warehouse/filelock's
// flock on a sidecar file next to the database: it holds for the whole run,
// while the file itself is open only now and then. With
// OpenOptions.NoExternalAccess every session starts with
// enable_external_access=false. No run_id index is made: a run's rows are
// inserted together and so fill row groups of their own, whose zone maps
// (min/max of run_id) let a current view's filter skip the other runs'
// groups.
//
// The package must not write anything outside the output schema of the
// study (apart from the lock file), must not create schemas, and must not
// correct the analyst's data: anything it cannot use as given is an error
// wrapping warehouse.ErrBadInput that names the column, the count and what
// to change.
package duckdb
