// Package warehousetest is the conformance suite every warehouse engine
// runs, so that "works on DuckDB" and "works on Postgres" mean the same
// thing: decoding rules, refusal of writing queries, the error classes and
// messages the CLI relies on, the tables and views of the contract,
// all-or-nothing publishing, locking, retention and the balance view's
// numbers.
//
// An engine's test calls RunConformance with an Engine adapter (its
// schema, how to open a new database, read rows back and reach another
// session); fixtures, fault injection and type names go through the
// engine's sqlcore.Core. The suite uses only standard SQL for its
// fixtures (CREATE TABLE, INSERT, VALUES, CAST to standard type names),
// so it needs no engine-specific text. UpgradeRunsTable and the
// benchmarks (BenchReadCohort, BenchPublish) are shared the same way.
//
// The package must not import any engine: engines import it from their
// tests.
package warehousetest
