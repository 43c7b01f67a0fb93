// Package sqlcore implements the warehouse.Warehouse contract once for SQL
// engines: runs, publishing, retention, views, run listing and diffs,
// prior sets, the cohort reader's checks and warehouse-scale mode. An
// engine supplies an Adapter (its connection, dialect, value decoding and
// lock) and gets a *Core that is the whole Warehouse.
//
// Adding an engine is writing that adapter in warehouse/<engine>:
//
//  1. Conn: Exec, Query with typed row scanning (*string, *int64, *int32,
//     *bool, *float64, *[]float64, *time.Time and pointers to them for
//     NULL) and Bulk, which streams columnar BulkCols into a table inside
//     the open transaction.
//  2. Dialect: type names, planner quirks, error classes, the hash of the
//     seed sample and the status-check migration.
//  3. Columns and Stream: the analyst's query's result columns classed as
//     Class values, and its rows fed value by value into the Sinks of the
//     shared Collector, which holds every decoding rule.
//  4. CheckSelect, Lock, User, Close.
//  5. Register the engine with warehouse.Register in init, embed its
//     dialect SQL with sqltext.RegisterDialect, and run
//     warehouse/warehousetest against it.
//
// The package must not import an engine's driver: every engine-specific
// byte lives behind the Adapter.
package sqlcore
