package postgres

import (
	"context"
	"fmt"

	"counterpart/warehouse"
)

var _ warehouse.ScalePublisher = (*Warehouse)(nil)

// SnapshotInto implements warehouse.ScalePublisher: the cohort snapshot
// by INSERT … SELECT inside the open (publish) transaction. The outcome
// types come from the prepared LIMIT 0 query's description (nothing runs).
func (w *Warehouse) SnapshotInto(ctx context.Context, out warehouse.Output, runID string, q warehouse.CohortQuery, d *warehouse.DesignSQL) error {
	if err := w.writable("snapshot"); err != nil {
		return err
	}
	if err := warehouse.CheckRoles(q); err != nil {
		return err
	}
	c, err := warehouse.NewContract(out)
	if err != nil {
		return err
	}
	sd, err := w.conn.PgConn().Prepare(ctx, "", "SELECT * FROM "+warehouse.From(q.SQL)+" LIMIT 0", nil)
	if err != nil {
		return fmt.Errorf("cohort.sql: %w", w.queryError(err))
	}
	types, err := w.columnTypes(ctx, sd.Fields)
	if err != nil {
		return err
	}
	isBool := map[string]bool{}
	for i, f := range sd.Fields {
		isBool[f.Name] = types[i].cls == clsBool
	}
	ob := make([]bool, len(q.Outcomes))
	for i, o := range q.Outcomes {
		ob[i] = isBool[o]
	}
	text, err := warehouse.SnapshotSQL(c, q, d, d.CovKinds(q), ob)
	if err != nil {
		return err
	}
	if _, err := w.conn.Exec(ctx, text, runID); err != nil {
		return fmt.Errorf("snapshot into %s: %w", c.Cohort.Name, w.queryError(err))
	}
	return nil
}

// QueryRows implements warehouse.ScalePublisher.
func (w *Warehouse) QueryRows(ctx context.Context, query string, args ...any) ([][]any, error) {
	rows, err := w.conn.Query(ctx, query, args...)
	if err != nil {
		return nil, w.queryError(err)
	}
	defer rows.Close()
	var out [][]any
	for rows.Next() {
		vals, err := rows.Values()
		if err != nil {
			return nil, w.queryError(err)
		}
		for i, v := range vals {
			switch x := v.(type) {
			case int64:
				vals[i] = float64(x)
			case int32:
				vals[i] = float64(x)
			case int16:
				vals[i] = float64(x)
			case float32:
				vals[i] = float64(x)
			}
		}
		out = append(out, vals)
	}
	if err := rows.Err(); err != nil {
		return nil, w.queryError(err)
	}
	return out, nil
}

// LateralLevels implements warehouse.ScalePublisher: Postgres pulls simple
// subqueries up into the parent query, copying their expressions.
func (w *Warehouse) LateralLevels() bool { return true }
