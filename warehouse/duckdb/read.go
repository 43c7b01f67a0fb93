package duckdb

import (
	"context"
	"database/sql/driver"
	"fmt"
	"strings"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
)

// ReadCohort runs q.SQL on the dedicated connection inside BEGIN
// TRANSACTION READ ONLY (always rolled back) and decodes the result into a
// columnar Cohort following the rules on warehouse.CohortQuery. Before
// running it, DuckDB prepares the text: more than one statement, or a
// statement that is not a SELECT, is refused without running anything.
//
// DuckDB-specific decoding: DATE covariates become numbers of days since
// 1970-01-01 (or their ISO text when listed as categorical); DECIMAL and
// HUGEINT values become float64 (the nearest double).
func (w *Warehouse) ReadCohort(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Cohort, error) {
	if err := checkRoles(q); err != nil {
		return nil, err
	}
	if _, err := w.exec(ctx, "BEGIN TRANSACTION READ ONLY"); err != nil {
		return nil, fmt.Errorf("begin read-only transaction: %w", dbErr(err))
	}
	defer w.rollback(ctx)
	if err := w.checkSelect(q.SQL); err != nil {
		return nil, err
	}
	rows, err := w.conn.QueryContext(ctx, q.SQL)
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: %w", queryError(err))
	}
	defer rows.Close()
	return decode(rows, q)
}

// checkRoles rejects a query description that names a column for two
// roles or lists a categorical that is not a covariate.
func checkRoles(q warehouse.CohortQuery) error {
	if q.Unit == "" || q.Treatment == "" {
		return fmt.Errorf("%w: cohort.unit and cohort.treatment must both name a column", warehouse.ErrBadInput)
	}
	role := map[string]string{}
	add := func(name, r string) error {
		if name == "" {
			return fmt.Errorf("%w: cohort.%s has an empty column name", warehouse.ErrBadInput, r)
		}
		if prev, ok := role[strings.ToLower(name)]; ok {
			return fmt.Errorf("%w: column %s is named as %s and as %s; give each column one role", warehouse.ErrBadInput, name, prev, r)
		}
		role[strings.ToLower(name)] = r
		return nil
	}
	if err := add(q.Unit, "unit"); err != nil {
		return err
	}
	if err := add(q.Treatment, "treatment"); err != nil {
		return err
	}
	for _, c := range q.Covariates {
		if err := add(c, "covariate"); err != nil {
			return err
		}
	}
	for _, o := range q.Outcomes {
		if err := add(o, "outcome"); err != nil {
			return err
		}
	}
	for _, c := range q.Categorical {
		if role[strings.ToLower(c)] != "covariate" {
			return fmt.Errorf("%w: cohort.categorical lists %s, which is not in cohort.covariates", warehouse.ErrBadInput, c)
		}
	}
	return nil
}

// checkSelect has DuckDB prepare the text and refuses anything but one
// SELECT. It uses the driver's Prepare without a context on purpose: with a
// context, duckdb-go runs every statement but the last while preparing,
// whereas Prepare refuses a multi-statement text before running any of it.
func (w *Warehouse) checkSelect(text string) error {
	return w.conn.Raw(func(dc any) error {
		conn, ok := dc.(driver.Conn)
		if !ok {
			return fmt.Errorf("cohort.sql: unexpected driver connection %T", dc)
		}
		st, err := conn.Prepare(text)
		if err != nil {
			msg := err.Error()
			switch {
			case strings.Contains(msg, "multi-statement"):
				return fmt.Errorf("%w: cohort.sql holds more than one statement (DuckDB also expands PIVOT into several); write a single SELECT", warehouse.ErrBadInput)
			case msg == "empty query":
				return fmt.Errorf("%w: cohort.sql is empty; write a SELECT that returns one row per unit", warehouse.ErrBadInput)
			}
			return fmt.Errorf("cohort.sql: %w", queryError(err))
		}
		defer st.Close()
		ds, ok := st.(*duckdb.Stmt)
		if !ok {
			return fmt.Errorf("cohort.sql: unexpected driver statement %T", st)
		}
		typ, err := ds.StatementType()
		if err != nil {
			return fmt.Errorf("cohort.sql: statement type: %w", err)
		}
		if typ == duckdb.STATEMENT_TYPE_SELECT {
			return nil
		}
		st2, known := stmtTypes[typ]
		name, writes := st2.name, st2.writes
		if !known {
			name, writes = fmt.Sprintf("statement type %d", typ), true
		}
		if writes {
			return fmt.Errorf("%w: cohort.sql: the query writes (%s); the cohort query must only read — move writes to your ETL", warehouse.ErrBadInput, name)
		}
		return fmt.Errorf("%w: cohort.sql is a %s statement; the cohort query must be a single SELECT", warehouse.ErrBadInput, name)
	})
}

// stmtType names a DuckDB statement type; writes marks those that change
// the database, the session or the transaction.
type stmtType struct {
	name   string
	writes bool
}

var stmtTypes = map[duckdb.StmtType]stmtType{
	duckdb.STATEMENT_TYPE_INSERT:       {"INSERT", true},
	duckdb.STATEMENT_TYPE_UPDATE:       {"UPDATE", true},
	duckdb.STATEMENT_TYPE_DELETE:       {"DELETE", true},
	duckdb.STATEMENT_TYPE_CREATE:       {"CREATE", true},
	duckdb.STATEMENT_TYPE_CREATE_FUNC:  {"CREATE FUNCTION", true},
	duckdb.STATEMENT_TYPE_ALTER:        {"ALTER", true},
	duckdb.STATEMENT_TYPE_DROP:         {"DROP", true},
	duckdb.STATEMENT_TYPE_COPY:         {"COPY", true},
	duckdb.STATEMENT_TYPE_ATTACH:       {"ATTACH", true},
	duckdb.STATEMENT_TYPE_DETACH:       {"DETACH", true},
	duckdb.STATEMENT_TYPE_EXPORT:       {"EXPORT", true},
	duckdb.STATEMENT_TYPE_VACUUM:       {"VACUUM", true},
	duckdb.STATEMENT_TYPE_ANALYZE:      {"ANALYZE", true},
	duckdb.STATEMENT_TYPE_LOAD:         {"LOAD", true},
	duckdb.STATEMENT_TYPE_EXTENSION:    {"INSTALL/LOAD extension", true},
	duckdb.STATEMENT_TYPE_SET:          {"SET", true},
	duckdb.STATEMENT_TYPE_VARIABLE_SET: {"SET VARIABLE", true},
	duckdb.STATEMENT_TYPE_TRANSACTION:  {"transaction control", true},
	duckdb.STATEMENT_TYPE_PREPARE:      {"PREPARE", true},
	duckdb.STATEMENT_TYPE_EXECUTE:      {"EXECUTE", true},
	duckdb.STATEMENT_TYPE_EXPLAIN:      {"EXPLAIN", false},
	duckdb.STATEMENT_TYPE_PRAGMA:       {"PRAGMA", false},
	duckdb.STATEMENT_TYPE_CALL:         {"CALL", false},
	duckdb.STATEMENT_TYPE_RELATION:     {"relation", false},
	duckdb.STATEMENT_TYPE_LOGICAL_PLAN: {"logical plan", false},
	duckdb.STATEMENT_TYPE_MULTI:        {"multi-statement", false},
}
