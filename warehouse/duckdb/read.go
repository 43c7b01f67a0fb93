package duckdb

import (
	"context"
	"database/sql/driver"
	"encoding/json"
	"fmt"
	"strings"

	duckdb "github.com/duckdb/duckdb-go/v2"

	sqltext "counterpart/sql"
	"counterpart/warehouse"
)

// ReadCohort runs q.SQL on the dedicated connection inside BEGIN
// TRANSACTION READ ONLY (always rolled back) and decodes the result into a
// columnar Cohort following the rules on warehouse.CohortQuery. Before it
// runs, DuckDB's parser must see exactly one SELECT and DuckDB must prepare
// it as a SELECT (checkSelect); anything else is refused with an error
// wrapping warehouse.ErrBadInput, and nothing of it runs. The read-only
// transaction stops what a SELECT could still write (nextval, say).
//
// DuckDB-specific decoding: DATE covariates become numbers of days since
// 1970-01-01 (or their ISO text when listed as categorical); DECIMAL and
// HUGEINT values become float64 (the nearest double).
func (w *Warehouse) ReadCohort(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Cohort, error) {
	if err := warehouse.CheckRoles(q); err != nil {
		return nil, err
	}
	if _, err := w.exec(ctx, "BEGIN TRANSACTION READ ONLY"); err != nil {
		return nil, fmt.Errorf("begin read-only transaction: %w", dbErr(err))
	}
	defer w.rollback(ctx)
	if err := w.checkSelect(ctx, q.SQL); err != nil {
		return nil, err
	}
	rows, err := w.conn.QueryContext(ctx, q.SQL)
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: %w", queryError(err))
	}
	defer rows.Close()
	return decode(rows, q)
}

// checkSelect refuses anything but one SELECT, in two steps, before the
// text runs:
//
//  1. DuckDB's parser alone (json_serialize_sql, which serializes only
//     SELECT statements) must see exactly one SELECT. Nothing is bound, so
//     nothing can happen: binding is not always free of effects — DuckDB
//     creates the target directory of EXPORT DATABASE while preparing it.
//  2. DuckDB prepares the text and its statement type must be SELECT. The
//     driver's Prepare without a context is used on purpose: with a context
//     duckdb-go runs every statement but the last while preparing.
func (w *Warehouse) checkSelect(ctx context.Context, text string) error {
	// json_serialize_sql needs its argument at bind time: a literal, not a
	// parameter. Literal doubles quotes; DuckDB string literals have no
	// other escapes.
	var parsed string
	q := "SELECT CAST(json_serialize_sql(" + sqltext.Literal(text) + ") AS VARCHAR)"
	if err := w.conn.QueryRowContext(ctx, q).Scan(&parsed); err != nil {
		return fmt.Errorf("cohort.sql: parse: %w", dbErr(err))
	}
	var p struct {
		Error        bool              `json:"error"`
		ErrorType    string            `json:"error_type"`
		ErrorMessage string            `json:"error_message"`
		Statements   []json.RawMessage `json:"statements"`
	}
	if err := json.Unmarshal([]byte(parsed), &p); err != nil {
		return fmt.Errorf("cohort.sql: parse: %w", err)
	}
	switch {
	case p.Error && p.ErrorType != "parser":
		// Not a SELECT. Name it by its first keyword; never prepare it.
		kw := firstKeyword(text)
		switch {
		case kw == "" || kw == "(" || kw == "WITH" || kw == "SELECT" || kw == "FROM" || kw == "VALUES":
			// A WITH before an INSERT, or a second statement after a SELECT.
			return fmt.Errorf("%w: cohort.sql holds a statement other than a SELECT; the cohort query must be a single SELECT that only reads — move writes to your ETL", warehouse.ErrBadInput)
		case readingKeywords[kw]:
			return fmt.Errorf("%w: cohort.sql is a %s statement; the cohort query must be a single SELECT", warehouse.ErrBadInput, kw)
		}
		return fmt.Errorf("%w: cohort.sql: the query writes (%s); the cohort query must only read — move writes to your ETL", warehouse.ErrBadInput, kw)
	case !p.Error && len(p.Statements) == 0:
		return fmt.Errorf("%w: cohort.sql is empty; write a SELECT that returns one row per unit", warehouse.ErrBadInput)
	case !p.Error && len(p.Statements) > 1:
		return fmt.Errorf("%w: cohort.sql holds %d statements; write a single SELECT", warehouse.ErrBadInput, len(p.Statements))
	}
	// A parser error falls through: preparing reports it in DuckDB's usual
	// words, and a text that does not parse cannot be bound.
	return w.conn.Raw(func(dc any) error {
		conn, ok := dc.(driver.Conn)
		if !ok {
			return fmt.Errorf("cohort.sql: unexpected driver connection %T", dc)
		}
		st, err := conn.Prepare(text)
		if err != nil {
			if strings.Contains(err.Error(), "multi-statement") {
				return fmt.Errorf("%w: cohort.sql holds more than one statement; write a single SELECT", warehouse.ErrBadInput)
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
		name, known := stmtTypes[typ]
		if !known {
			name = fmt.Sprintf("statement type %d", typ)
		}
		return fmt.Errorf("%w: cohort.sql: the query writes (%s); the cohort query must only read — move writes to your ETL", warehouse.ErrBadInput, name)
	})
}

// firstKeyword returns the first word of an SQL text in upper case,
// skipping blanks and comments; "(" when the text starts with one.
func firstKeyword(text string) string {
	s := text
	for {
		s = strings.TrimLeft(s, " \t\r\n\f")
		switch {
		case strings.HasPrefix(s, "--"):
			if i := strings.IndexByte(s, '\n'); i >= 0 {
				s = s[i+1:]
				continue
			}
			return ""
		case strings.HasPrefix(s, "/*"):
			if i := strings.Index(s, "*/"); i >= 0 {
				s = s[i+2:]
				continue
			}
			return ""
		case strings.HasPrefix(s, "("):
			return "("
		}
		break
	}
	end := strings.IndexFunc(s, func(r rune) bool {
		return !(r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r == '_')
	})
	if end < 0 {
		end = len(s)
	}
	return strings.ToUpper(s[:end])
}

// readingKeywords start statements that are not SELECTs but do not write
// either; every other non-SELECT is reported as a write.
var readingKeywords = map[string]bool{
	"EXPLAIN": true, "PRAGMA": true, "PIVOT": true, "UNPIVOT": true, "CALL": true,
	"DESCRIBE": true, "SHOW": true, "SUMMARIZE": true,
}

// stmtTypes names DuckDB's statement types, for a text that parses as a
// SELECT yet prepares as something else.
var stmtTypes = map[duckdb.StmtType]string{
	duckdb.STATEMENT_TYPE_INSERT:       "INSERT",
	duckdb.STATEMENT_TYPE_UPDATE:       "UPDATE",
	duckdb.STATEMENT_TYPE_DELETE:       "DELETE",
	duckdb.STATEMENT_TYPE_CREATE:       "CREATE",
	duckdb.STATEMENT_TYPE_CREATE_FUNC:  "CREATE FUNCTION",
	duckdb.STATEMENT_TYPE_ALTER:        "ALTER",
	duckdb.STATEMENT_TYPE_DROP:         "DROP",
	duckdb.STATEMENT_TYPE_COPY:         "COPY",
	duckdb.STATEMENT_TYPE_ATTACH:       "ATTACH",
	duckdb.STATEMENT_TYPE_DETACH:       "DETACH",
	duckdb.STATEMENT_TYPE_EXPORT:       "EXPORT",
	duckdb.STATEMENT_TYPE_VACUUM:       "VACUUM",
	duckdb.STATEMENT_TYPE_ANALYZE:      "ANALYZE",
	duckdb.STATEMENT_TYPE_LOAD:         "LOAD",
	duckdb.STATEMENT_TYPE_EXTENSION:    "INSTALL/LOAD extension",
	duckdb.STATEMENT_TYPE_SET:          "SET",
	duckdb.STATEMENT_TYPE_VARIABLE_SET: "SET VARIABLE",
	duckdb.STATEMENT_TYPE_TRANSACTION:  "transaction control",
	duckdb.STATEMENT_TYPE_PREPARE:      "PREPARE",
	duckdb.STATEMENT_TYPE_EXECUTE:      "EXECUTE",
	duckdb.STATEMENT_TYPE_EXPLAIN:      "EXPLAIN",
	duckdb.STATEMENT_TYPE_PRAGMA:       "PRAGMA",
	duckdb.STATEMENT_TYPE_CALL:         "CALL",
	duckdb.STATEMENT_TYPE_RELATION:     "relation",
	duckdb.STATEMENT_TYPE_LOGICAL_PLAN: "logical plan",
	duckdb.STATEMENT_TYPE_MULTI:        "multi-statement",
}
