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
	"counterpart/warehouse/sqlcore"
)

// CheckSelect refuses anything but one SELECT, in two steps, before the
// text runs (the read-only transaction then stops what a SELECT could
// still write, nextval say):
//
//  1. DuckDB's parser alone (json_serialize_sql, which serializes only
//     SELECT statements) must see exactly one SELECT. Nothing is bound, so
//     nothing can happen: binding is not always free of effects — DuckDB
//     creates the target directory of EXPORT DATABASE while preparing it.
//  2. DuckDB prepares the text and its statement type must be SELECT. The
//     driver's Prepare without a context is used on purpose: with a context
//     duckdb-go runs every statement but the last while preparing.
func (a *adapter) CheckSelect(ctx context.Context, text string) error {
	// json_serialize_sql needs its argument at bind time: a literal, not a
	// parameter. Literal doubles quotes; DuckDB string literals have no
	// other escapes.
	var parsed string
	q := "SELECT CAST(json_serialize_sql(" + sqltext.Literal(text) + ") AS VARCHAR)"
	if err := a.conn.QueryRowContext(ctx, q).Scan(&parsed); err != nil {
		return fmt.Errorf("cohort.sql: parse: %w", dialect.Err(err))
	}
	var p struct {
		Error      bool              `json:"error"`
		ErrorType  string            `json:"error_type"`
		Statements []json.RawMessage `json:"statements"`
	}
	if err := json.Unmarshal([]byte(parsed), &p); err != nil {
		return fmt.Errorf("cohort.sql: parse: %w", err)
	}
	writes := "%w: cohort.sql: the query writes (%s); the cohort query must only read — move writes to your ETL"
	switch kw := sqlcore.FirstKeyword(text, false); {
	case p.Error && p.ErrorType != "parser":
		// Not a SELECT. Name it by its first keyword; never prepare it.
		switch kw {
		case "", "(", "WITH", "SELECT", "FROM", "VALUES":
			// A WITH before an INSERT, or a second statement after a SELECT.
			return fmt.Errorf("%w: cohort.sql holds a statement other than a SELECT; the cohort query must be a single SELECT that only reads — move writes to your ETL", warehouse.ErrBadInput)
		case "EXPLAIN", "PRAGMA", "PIVOT", "UNPIVOT", "CALL", "DESCRIBE", "SHOW", "SUMMARIZE":
			return fmt.Errorf("%w: cohort.sql is a %s statement; the cohort query must be a single SELECT", warehouse.ErrBadInput, kw)
		}
		return fmt.Errorf(writes, warehouse.ErrBadInput, kw)
	case !p.Error && len(p.Statements) == 0:
		return fmt.Errorf("%w: cohort.sql is empty; write a SELECT that returns one row per unit", warehouse.ErrBadInput)
	case !p.Error && len(p.Statements) > 1:
		return fmt.Errorf("%w: cohort.sql holds %d statements; write a single SELECT", warehouse.ErrBadInput, len(p.Statements))
	}
	// A parser error falls through: preparing reports it in DuckDB's usual
	// words, and a text that does not parse cannot be bound.
	return a.conn.Raw(func(dc any) error {
		st, err := dc.(driver.Conn).Prepare(text)
		if err != nil {
			if strings.Contains(err.Error(), "multi-statement") {
				return fmt.Errorf("%w: cohort.sql holds more than one statement; write a single SELECT", warehouse.ErrBadInput)
			}
			return fmt.Errorf("cohort.sql: %w", queryError(err))
		}
		defer st.Close()
		typ, err := st.(*duckdb.Stmt).StatementType()
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
		return fmt.Errorf(writes, warehouse.ErrBadInput, name)
	})
}

// stmtTypes names DuckDB's statement types, for a text that parses as a
// SELECT yet prepares as something else.
var stmtTypes = map[duckdb.StmtType]string{
	duckdb.STATEMENT_TYPE_INSERT: "INSERT", duckdb.STATEMENT_TYPE_UPDATE: "UPDATE", duckdb.STATEMENT_TYPE_DELETE: "DELETE",
	duckdb.STATEMENT_TYPE_CREATE: "CREATE", duckdb.STATEMENT_TYPE_CREATE_FUNC: "CREATE FUNCTION", duckdb.STATEMENT_TYPE_ALTER: "ALTER",
	duckdb.STATEMENT_TYPE_DROP: "DROP", duckdb.STATEMENT_TYPE_COPY: "COPY", duckdb.STATEMENT_TYPE_ATTACH: "ATTACH",
	duckdb.STATEMENT_TYPE_DETACH: "DETACH", duckdb.STATEMENT_TYPE_EXPORT: "EXPORT", duckdb.STATEMENT_TYPE_VACUUM: "VACUUM",
	duckdb.STATEMENT_TYPE_ANALYZE: "ANALYZE", duckdb.STATEMENT_TYPE_LOAD: "LOAD", duckdb.STATEMENT_TYPE_EXTENSION: "INSTALL/LOAD extension",
	duckdb.STATEMENT_TYPE_SET: "SET", duckdb.STATEMENT_TYPE_VARIABLE_SET: "SET VARIABLE", duckdb.STATEMENT_TYPE_TRANSACTION: "transaction control",
	duckdb.STATEMENT_TYPE_PREPARE: "PREPARE", duckdb.STATEMENT_TYPE_EXECUTE: "EXECUTE", duckdb.STATEMENT_TYPE_EXPLAIN: "EXPLAIN",
	duckdb.STATEMENT_TYPE_PRAGMA: "PRAGMA", duckdb.STATEMENT_TYPE_CALL: "CALL", duckdb.STATEMENT_TYPE_RELATION: "relation",
	duckdb.STATEMENT_TYPE_LOGICAL_PLAN: "logical plan", duckdb.STATEMENT_TYPE_MULTI: "multi-statement",
}

// classOf reads a result column's DuckDB type name.
func classOf(dbType string) sqlcore.Class {
	switch dbType {
	case "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT", "UHUGEINT":
		return sqlcore.ClassInt
	case "FLOAT", "DOUBLE":
		return sqlcore.ClassFloat
	case "BOOLEAN":
		return sqlcore.ClassBool
	case "VARCHAR", "ENUM":
		return sqlcore.ClassText
	case "DATE":
		return sqlcore.ClassDate
	case "SQLNULL":
		return sqlcore.ClassNull
	}
	if strings.HasPrefix(dbType, "DECIMAL") {
		return sqlcore.ClassDecimal
	}
	return sqlcore.ClassOther
}

// decoder reads the analyst's query. DuckDB-specific decoding: DATE
// becomes days since 1970-01-01 (ISO text when categorical); DECIMAL and
// HUGEINT become the nearest float64.
var decoder = &sqlcore.SQLDecoder{Class: classOf, Err: dialect.Err, QueryErr: queryError,
	Value: func(s sqlcore.Sink, v any) bool {
		d, ok := v.(duckdb.Decimal)
		if ok {
			s.Exact(decimalFloat(d), d.String(), false)
		}
		return ok
	}}

// Columns describes text's result without reading rows.
func (a *adapter) Columns(ctx context.Context, text string) ([]sqlcore.Column, error) {
	return decoder.Columns(ctx, a.conn, text)
}

// pow10 holds the exactly representable powers of ten.
var pow10 = [...]float64{1, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// decimalFloat is the double nearest a DECIMAL: when the unscaled value and
// the power of ten are both exact doubles, one IEEE division rounds
// correctly; otherwise the driver's big.Float path.
func decimalFloat(d duckdb.Decimal) float64 {
	if d.Value.IsInt64() && int(d.Scale) < len(pow10) {
		if v := d.Value.Int64(); v > -(1<<53) && v < 1<<53 {
			return float64(v) / pow10[d.Scale]
		}
	}
	return d.Float64()
}
