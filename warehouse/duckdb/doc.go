// Package duckdb is counterpart's DuckDB engine: it implements
// warehouse.Warehouse over one DuckDB database file.
//
// One dedicated connection serves the whole run, so the read-only cohort
// transaction, the publish transaction and the bulk writes share it. The
// cohort query runs inside BEGIN TRANSACTION READ ONLY and is refused
// before it runs unless DuckDB prepares it as a single SELECT; decoding goes
// straight from the result into the columnar warehouse.Cohort. Publish
// writes every table through a table function over the columnar slices
// (bulk.go) inside one explicit transaction (a test checks that appended
// rows disappear on ROLLBACK). The per-study lock is warehouse/filelock's
// flock on a sidecar file next to the database; DuckDB's own file lock
// keeps other processes out of the file while it is open read-write.
//
// The package must not write anything outside the output schema of the
// study (apart from the lock file), must not create schemas, and must not
// correct the analyst's data: anything it cannot use as given is an error
// wrapping warehouse.ErrBadInput that names the column, the count and what
// to change.
package duckdb
