package postgres

import (
	"context"
	"fmt"
	"strings"
	"time"

	"github.com/jackc/pgx/v5/pgconn"

	"counterpart/warehouse"
)

// cohortStmt names the server-side prepared statement of the cohort query
// while it is read; a name (not the unnamed statement) so that the type
// look-up in between cannot replace it.
const cohortStmt = "counterpart_cohort"

// ReadCohort runs q.SQL inside BEGIN READ ONLY (always rolled back) and
// decodes the result into a columnar Cohort following the rules on
// warehouse.CohortQuery.
//
// The text is first prepared (Parse/Describe, nothing runs): more than one
// statement is refused by the server there, and a statement that returns
// no columns (INSERT, DROP, ...) is refused before it runs. What remains
// runs in the read-only transaction, where any write (INSERT ... RETURNING,
// a data-modifying WITH, nextval) fails with SQLSTATE 25006. Errors of the
// query (syntax, unknown table or column, a write) wrap
// warehouse.ErrBadInput.
//
// Rows are read as raw wire values (binary for integers, floats, booleans,
// dates and text; text for numeric and enums) and appended straight into
// the Cohort's column slices: no per-row []any. Postgres-specific decoding
// (README "## Postgres"): int2/int4/int8 as integers; numeric through its
// decimal text, parsed to the nearest float64; date as days since
// 1970-01-01 (ISO text when listed as categorical); enum as text.
func (w *Warehouse) ReadCohort(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Cohort, error) {
	if err := warehouse.CheckRoles(q); err != nil {
		return nil, err
	}
	if strings.TrimSpace(strings.Trim(q.SQL, "; \t\r\n")) == "" {
		return nil, fmt.Errorf("%w: cohort.sql is empty; write a SELECT that returns one row per unit", warehouse.ErrBadInput)
	}
	if _, err := w.conn.Exec(ctx, "BEGIN READ ONLY"); err != nil {
		return nil, fmt.Errorf("begin read-only transaction: %w", w.dbErr(err))
	}
	pc := w.conn.PgConn()
	prepared := false
	defer func() {
		w.rollback(ctx)
		if prepared {
			dctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
			defer cancel()
			_ = pc.Deallocate(dctx, cohortStmt)
		}
	}()
	sd, err := pc.Prepare(ctx, cohortStmt, q.SQL, nil)
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: %w", w.queryError(err))
	}
	prepared = true
	if len(sd.Fields) == 0 {
		kw := firstKeyword(q.SQL)
		return nil, fmt.Errorf("%w: cohort.sql is a %s statement, which returns no rows; the cohort query must be a single SELECT that only reads — move writes to your ETL",
			warehouse.ErrBadInput, kw)
	}
	types, err := w.columnTypes(ctx, sd.Fields)
	if err != nil {
		return nil, err
	}
	dec, err := newDecoder(q, sd.Fields, types)
	if err != nil {
		return nil, err
	}
	rr := pc.ExecPrepared(ctx, cohortStmt, nil, nil, dec.formats)
	for rr.NextRow() {
		if err := dec.row(rr.Values()); err != nil {
			_, _ = rr.Close()
			return nil, fmt.Errorf("cohort.sql: row %d: %w", dec.n, err)
		}
	}
	if _, err := rr.Close(); err != nil {
		return nil, fmt.Errorf("cohort.sql: %w", w.queryError(err))
	}
	return dec.finish()
}

// pgType is what the engine knows of a result column's type.
type pgType struct {
	name string // as format_type prints it, for messages
	cls  class
	kind kind
}

// columnTypes classes every result column. Built-in types are known by
// OID; others (enums, domains) are looked up in pg_type once per query.
func (w *Warehouse) columnTypes(ctx context.Context, fields []pgconn.FieldDescription) ([]pgType, error) {
	types := make([]pgType, len(fields))
	var unknown []uint32
	for i, f := range fields {
		if t, ok := builtin[f.DataTypeOID]; ok {
			types[i] = t
		} else {
			unknown = append(unknown, f.DataTypeOID)
		}
	}
	if len(unknown) == 0 {
		return types, nil
	}
	// typtype e = enum, d = domain (classed by its base type).
	rows, err := w.conn.Query(ctx, `SELECT t.oid, pg_catalog.format_type(t.oid, NULL), t.typtype, t.typbasetype
		FROM pg_catalog.pg_type t WHERE t.oid = ANY($1)`, unknown)
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: column types: %w", w.dbErr(err))
	}
	defer rows.Close()
	looked := map[uint32]pgType{}
	for rows.Next() {
		var oid, base uint32
		var name, typtype string
		if err := rows.Scan(&oid, &name, &typtype, &base); err != nil {
			return nil, fmt.Errorf("cohort.sql: column types: %w", w.dbErr(err))
		}
		t := pgType{name: name, cls: clsOther}
		switch {
		case typtype == "e":
			t.cls, t.kind = clsText, kEnum
		case typtype == "d":
			if b, ok := builtin[base]; ok {
				t.cls, t.kind = b.cls, b.kind
			}
		}
		looked[oid] = t
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("cohort.sql: column types: %w", w.dbErr(err))
	}
	for i, f := range fields {
		if types[i].name == "" {
			t, ok := looked[f.DataTypeOID]
			if !ok {
				t = pgType{name: fmt.Sprintf("type oid %d", f.DataTypeOID), cls: clsOther}
			}
			types[i] = t
		}
	}
	return types, nil
}

// firstKeyword returns the first word of an SQL text in upper case,
// skipping blanks and comments, for messages.
func firstKeyword(text string) string {
	s := text
	for {
		s = strings.TrimLeft(s, " \t\r\n\f(")
		switch {
		case strings.HasPrefix(s, "--"):
			if i := strings.IndexByte(s, '\n'); i >= 0 {
				s = s[i+1:]
				continue
			}
			return "comment-only"
		case strings.HasPrefix(s, "/*"):
			if i := strings.Index(s, "*/"); i >= 0 {
				s = s[i+2:]
				continue
			}
			return "comment-only"
		}
		break
	}
	end := strings.IndexFunc(s, func(r rune) bool {
		return !(r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r == '_')
	})
	if end < 0 {
		end = len(s)
	}
	if end == 0 {
		return "non-SELECT"
	}
	return strings.ToUpper(s[:end])
}
