package postgres

import (
	"context"
	"fmt"
	"time"

	"github.com/jackc/pgx/v5/pgconn"

	"counterpart/warehouse"
	"counterpart/warehouse/sqlcore"
)

// cohortStmt names the server-side prepared statement of the cohort query
// while it is read; a name (not the unnamed statement) so that the type
// look-up in between cannot replace it.
const cohortStmt = "counterpart_cohort"

// CheckSelect has nothing to do before the text runs: wrapped as a
// derived table, Postgres accepts no data-modifying statement, and Stream
// prepares the text first (Parse/Describe, nothing runs), where more than
// one statement is refused and one that returns no columns (INSERT,
// DROP, ...) is refused before it runs. What remains runs in the
// read-only transaction, where any write (INSERT ... RETURNING, a
// data-modifying WITH, nextval) fails with SQLSTATE 25006.
func (w *adapter) CheckSelect(context.Context, string) error { return nil }

// Columns describes text's result from the prepared LIMIT 0 query.
func (w *adapter) Columns(ctx context.Context, text string) ([]sqlcore.Column, error) {
	sd, err := w.conn.PgConn().Prepare(ctx, "", "SELECT * FROM "+warehouse.From(text)+" LIMIT 0", nil)
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: %w", w.queryError(err))
	}
	cols, _, err := w.columnTypes(ctx, sd.Fields)
	return cols, err
}

// Stream prepares text under a name (so that the type look-up in between
// cannot replace it) and reads the rows as raw wire values (binary for
// integers, floats, booleans, dates and text; text for numeric and enums)
// straight into the sinks: no per-row []any. Postgres-specific decoding
// (README "## Postgres"): numeric through its decimal text, parsed to the
// nearest float64; date as days since 1970-01-01; enum as text.
func (w *adapter) Stream(ctx context.Context, text string, open func([]sqlcore.Column) ([]sqlcore.Sink, error)) error {
	pc := w.conn.PgConn()
	sd, err := pc.Prepare(ctx, cohortStmt, text, nil)
	if err != nil {
		return fmt.Errorf("cohort.sql: %w", w.queryError(err))
	}
	defer func() {
		dctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
		defer cancel()
		_ = pc.Deallocate(dctx, cohortStmt)
	}()
	if len(sd.Fields) == 0 {
		kw := sqlcore.FirstKeyword(text, true)
		if kw == "" {
			kw = "non-SELECT"
		}
		return fmt.Errorf("%w: cohort.sql is a %s statement, which returns no rows; the cohort query must be a single SELECT that only reads — move writes to your ETL",
			warehouse.ErrBadInput, kw)
	}
	cols, kinds, err := w.columnTypes(ctx, sd.Fields)
	if err != nil {
		return err
	}
	sinks, err := open(cols)
	if err != nil {
		return err
	}
	formats := make([]int16, len(kinds))
	for i, k := range kinds {
		formats[i] = k.format()
	}
	rr := pc.ExecPrepared(ctx, cohortStmt, nil, nil, formats)
	for n := 1; rr.NextRow(); n++ {
		vals := rr.Values()
		for i, s := range sinks {
			if s != nil && i < len(vals) {
				if err := feed(s, kinds[i], vals[i]); err != nil {
					_, _ = rr.Close()
					return fmt.Errorf("cohort.sql: row %d: %w", n, err)
				}
			}
		}
	}
	if _, err := rr.Close(); err != nil {
		return fmt.Errorf("cohort.sql: %w", w.queryError(err))
	}
	return nil
}

// pgType is what the engine knows of a result column's type.
type pgType struct {
	name string // as format_type prints it, for messages
	cls  sqlcore.Class
	kind kind
}

// columnTypes classes every result column. Built-in types are known by
// OID; others (enums, domains) are looked up in pg_type once per query.
func (w *adapter) columnTypes(ctx context.Context, fields []pgconn.FieldDescription) ([]sqlcore.Column, []kind, error) {
	types, err := w.pgTypes(ctx, fields)
	if err != nil {
		return nil, nil, err
	}
	cols := make([]sqlcore.Column, len(types))
	kinds := make([]kind, len(types))
	for i, t := range types {
		cols[i], kinds[i] = sqlcore.Column{Name: fields[i].Name, Type: t.name, Class: t.cls}, t.kind
	}
	return cols, kinds, nil
}

func (w *adapter) pgTypes(ctx context.Context, fields []pgconn.FieldDescription) ([]pgType, error) {
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
		t := pgType{name: name, cls: sqlcore.ClassOther}
		switch {
		case typtype == "e":
			t.cls, t.kind = sqlcore.ClassText, kEnum
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
				t = pgType{name: fmt.Sprintf("type oid %d", f.DataTypeOID), cls: sqlcore.ClassOther}
			}
			types[i] = t
		}
	}
	return types, nil
}
