package duckdb

import (
	"context"
	"database/sql/driver"
	"errors"
	"fmt"
	"math"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
)

// column is one appended column: its name and how to read row i.
type column struct {
	name string
	get  func(i int) driver.Value
}

// appendAll writes the cohort snapshot, scores, matches and weights of p
// through bulk inserts (see bulk.go).
func (w *Warehouse) appendAll(ctx context.Context, o *objects, out warehouse.Output, p *warehouse.Publication) error {
	c := p.Cohort
	run := p.Run.RunID
	unitCol := func(idx []int) *bulkCol {
		if c.IDKind == warehouse.IDInt {
			return &bulkCol{i64: c.IntIDs, idx: idx, kind: duckdb.TYPE_BIGINT}
		}
		return &bulkCol{s: c.TextIDs, idx: idx, kind: duckdb.TYPE_VARCHAR}
	}
	f64 := func(v []float64) *bulkCol { return &bulkCol{f64: v, kind: duckdb.TYPE_DOUBLE} }
	boolean := func(v []bool) *bulkCol { return &bulkCol{b: v, kind: duckdb.TYPE_BOOLEAN} }

	cohort := []bulkTarget{{name: out.Unit, col: unitCol(nil)}, {name: out.Treatment, col: boolean(c.Treated)}}
	covs := map[string]*warehouse.Covariate{}
	for i := range c.Covariates {
		covs[c.Covariates[i].Name] = &c.Covariates[i]
	}
	for _, m := range out.Covariates {
		cv := covs[m.Name]
		if m.Kind == warehouse.Categorical {
			cohort = append(cohort, bulkTarget{name: m.Name, expr: levelsExpr(cv.Levels), col: &bulkCol{i32: cv.Codes, kind: duckdb.TYPE_INTEGER}})
		} else {
			cohort = append(cohort, bulkTarget{name: m.Name, col: f64(cv.Values)})
		}
	}
	outcomes := map[string][]float64{}
	for _, oc := range c.Outcomes {
		outcomes[oc.Name] = oc.Values
	}
	for _, name := range out.Outcomes {
		cohort = append(cohort, bulkTarget{name: name, col: f64(outcomes[name])})
	}
	if err := w.insertBulk(ctx, o.c.Schema, o.c.Cohort.Name, run, cohort, c.N()); err != nil {
		return err
	}
	if err := w.step("cohort"); err != nil {
		return err
	}

	scores := []bulkTarget{{name: out.Unit, col: unitCol(nil)}, {name: "treated", col: boolean(c.Treated)},
		{name: "ps", col: f64(p.PS)}, {name: "logit_ps", col: f64(p.LogitPS)}, {name: "in_support", col: boolean(p.InSupport)}}
	if err := w.insertBulk(ctx, o.c.Schema, o.c.Scores.Name, run, scores, c.N()); err != nil {
		return err
	}
	if err := w.step("scores"); err != nil {
		return err
	}

	m := p.Matches
	matches := []bulkTarget{
		{name: "set_id", col: &bulkCol{i64: m.SetID, kind: duckdb.TYPE_BIGINT}},
		{name: out.Unit, col: unitCol(m.Unit)},
		{name: "treated", col: boolean(m.Treated)},
		{name: "set_weight", col: f64(m.SetWeight)},
		{name: "match_distance", col: f64(m.Distance)},
	}
	if m.Len() > 0 {
		if err := w.insertBulk(ctx, o.c.Schema, o.c.Matches.Name, run, matches, m.Len()); err != nil {
			return err
		}
	}
	if err := w.step("matches"); err != nil {
		return err
	}

	weights := []bulkTarget{{name: out.Unit, col: unitCol(nil)}, {name: "treated", col: boolean(c.Treated)}}
	for k, s := range out.Schemes {
		weights = append(weights, bulkTarget{name: s, col: f64(p.Weights[k])})
	}
	if err := w.insertBulk(ctx, o.c.Schema, o.c.Weights.Name, run, weights, c.N()); err != nil {
		return err
	}
	return w.step("weights")
}

// floatCol reads a float64 column; NaN is written as NULL.
func floatCol(v []float64) func(int) driver.Value {
	return func(i int) driver.Value {
		if math.IsNaN(v[i]) {
			return nil
		}
		return v[i]
	}
}

func boolCol(v []bool) func(int) driver.Value {
	return func(i int) driver.Value { return v[i] }
}

// appendRows appends n rows to schema.table through DuckDB's appender on
// the dedicated connection, inside whatever transaction is open there.
// Only the listed columns are written; a table's other columns (those of
// covariates or schemes a study no longer uses) get NULL.
func (w *Warehouse) appendRows(ctx context.Context, schema, table string, cols []column, n int) error {
	names := make([]string, len(cols))
	for i, c := range cols {
		names[i] = c.name
	}
	err := w.conn.Raw(func(dc any) error {
		conn, ok := dc.(driver.Conn)
		if !ok {
			return fmt.Errorf("unexpected driver connection %T", dc)
		}
		a, err := duckdb.NewAppenderWithColumns(conn, "", schema, table, names)
		if err != nil {
			return err
		}
		row := make([]driver.Value, len(cols))
		for i := range n {
			if i%(1<<14) == 0 {
				if err := ctx.Err(); err != nil {
					return errors.Join(err, a.Clear(), a.Close())
				}
			}
			for j := range cols {
				row[j] = cols[j].get(i)
			}
			if err := a.AppendRow(row...); err != nil {
				return errors.Join(fmt.Errorf("row %d: %w", i+1, err), a.Clear(), a.Close())
			}
		}
		return a.CloseWithCancel(ctx)
	})
	if err != nil {
		return fmt.Errorf("append to %s: %w", table, err)
	}
	return nil
}
