package duckdb

import (
	"context"
	"fmt"

	"counterpart/warehouse"
)

var _ warehouse.ScalePublisher = (*Warehouse)(nil)

// SnapshotInto implements warehouse.ScalePublisher: the cohort snapshot
// by INSERT … SELECT inside the open (publish) transaction.
func (w *Warehouse) SnapshotInto(ctx context.Context, out warehouse.Output, runID string, q warehouse.CohortQuery, d *warehouse.DesignSQL) error {
	if err := w.writable("snapshot"); err != nil {
		return err
	}
	if err := warehouse.CheckRoles(q); err != nil {
		return err
	}
	if err := w.checkSelect(ctx, q.SQL); err != nil {
		return err
	}
	c, err := warehouse.NewContract(out)
	if err != nil {
		return err
	}
	rows, err := w.conn.QueryContext(ctx, "SELECT * FROM "+warehouse.From(q.SQL)+" LIMIT 0")
	if err != nil {
		return fmt.Errorf("cohort.sql: %w", queryError(err))
	}
	cts, err := rows.ColumnTypes()
	rows.Close()
	if err != nil {
		return fmt.Errorf("cohort.sql: column types: %w", dbErr(err))
	}
	isBool := map[string]bool{}
	for _, ct := range cts {
		isBool[ct.Name()] = classOf(ct.DatabaseTypeName()) == clsBool
	}
	ob := make([]bool, len(q.Outcomes))
	for i, o := range q.Outcomes {
		ob[i] = isBool[o]
	}
	text, err := warehouse.SnapshotSQL(c, q, d, d.CovKinds(q), ob)
	if err != nil {
		return err
	}
	if _, err := w.exec(ctx, text, runID); err != nil {
		return fmt.Errorf("snapshot into %s: %w", c.Cohort.Name, queryError(err))
	}
	return nil
}

// QueryRows implements warehouse.ScalePublisher.
func (w *Warehouse) QueryRows(ctx context.Context, query string, args ...any) ([][]any, error) {
	rows, err := w.conn.QueryContext(ctx, query, args...)
	if err != nil {
		return nil, queryError(err)
	}
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		return nil, dbErr(err)
	}
	var out [][]any
	for rows.Next() {
		vals := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for i := range vals {
			ptrs[i] = &vals[i]
		}
		if err := rows.Scan(ptrs...); err != nil {
			return nil, dbErr(err)
		}
		for i, v := range vals {
			vals[i] = normalise(v)
		}
		out = append(out, vals)
	}
	if err := rows.Err(); err != nil {
		return nil, queryError(err)
	}
	return out, nil
}

// normalise maps a scanned value to float64, string, bool or nil.
func normalise(v any) any {
	switch x := v.(type) {
	case int64:
		return float64(x)
	case int32:
		return float64(x)
	case int16:
		return float64(x)
	case int8:
		return float64(x)
	case uint64:
		return float64(x)
	case uint32:
		return float64(x)
	case float32:
		return float64(x)
	case []byte:
		return string(x)
	}
	return v
}

// LateralLevels implements warehouse.ScalePublisher: DuckDB computes each
// projection of a derived table once.
func (w *Warehouse) LateralLevels() bool { return false }
