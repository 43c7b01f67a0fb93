// Package sqlcore implements the warehouse.Warehouse contract once for SQL
// engines: runs, publishing, retention, views, run listing and diffs,
// prior sets, the cohort reader's checks and warehouse-scale mode. An
// engine supplies an Adapter (its connection, dialect, value decoding and
// lock) and gets a *Core that is the whole Warehouse.
//
// Adding an engine is writing that adapter in warehouse/<engine>, about
// five files and nothing outside the folder but a blank import in
// warehouse/engines:
//
//  1. Conn: Exec, Query with typed row scanning (*string, *int64, *int32,
//     *bool, *float64, *[]float64, *time.Time and pointers to them for
//     NULL) and Bulk, which streams columnar BulkCols into a table inside
//     the open transaction (BulkNames gives its column list).
//  2. Dialect: type names, planner quirks, error classes (Flat keeps a
//     one-line message over the driver's error; OneLine, Scrub and
//     DSNSecrets are shared), the hash of the seed sample and the
//     status-check migration (Core.RebuildRuns where a constraint cannot
//     be altered).
//  3. Columns and Stream: the analyst's query's result columns classed as
//     Class values, and its rows fed value by value into the Sinks of the
//     shared Collector, which holds every decoding rule. A database/sql
//     driver gets both from an SQLDecoder and decodes only its own types.
//     An engine that reads column blocks may hand runs of non-NULL numbers
//     to a sink's Batch methods (batch.go) instead, with the same result.
//  4. CheckSelect, Lock (warehouse/filelock for a file-backed engine),
//     User, Close.
//  5. Register the engine and its embedded dialect SQL with Register in
//     init, and run warehouse/warehousetest's RunConformance against it;
//     LoadTable (the demo's and tests' loader) then works unchanged.
//
// The package must not import an engine's driver: every engine-specific
// byte lives behind the Adapter.
package sqlcore
