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

// appendAll writes the cohort snapshot, scores, matches and weights of p.
func (w *Warehouse) appendAll(ctx context.Context, o *objects, out warehouse.Output, p *warehouse.Publication) error {
	c := p.Cohort
	var runID driver.Value = p.Run.RunID // boxed once, not once per row
	run := column{"run_id", func(int) driver.Value { return runID }}
	unit := func(i int) driver.Value { return c.TextIDs[i] }
	if c.IDKind == warehouse.IDInt {
		unit = func(i int) driver.Value { return c.IntIDs[i] }
	}

	cohort := []column{run, {out.Unit, unit}, {out.Treatment, boolCol(c.Treated)}}
	covs := map[string]*warehouse.Covariate{}
	for i := range c.Covariates {
		covs[c.Covariates[i].Name] = &c.Covariates[i]
	}
	for _, m := range out.Covariates {
		cv := covs[m.Name]
		if m.Kind == warehouse.Categorical {
			levels := make([]driver.Value, len(cv.Levels))
			for k, l := range cv.Levels {
				levels[k] = l
			}
			codes := cv.Codes
			cohort = append(cohort, column{m.Name, func(i int) driver.Value { return levels[codes[i]] }})
		} else {
			cohort = append(cohort, column{m.Name, floatCol(cv.Values)})
		}
	}
	outcomes := map[string][]float64{}
	for _, oc := range c.Outcomes {
		outcomes[oc.Name] = oc.Values
	}
	for _, name := range out.Outcomes {
		cohort = append(cohort, column{name, floatCol(outcomes[name])})
	}
	if err := w.appendRows(ctx, o.c.Schema, o.c.Cohort.Name, cohort, c.N()); err != nil {
		return err
	}
	if err := w.step("cohort"); err != nil {
		return err
	}

	treated := column{"treated", boolCol(c.Treated)}
	scores := []column{run, {out.Unit, unit}, treated,
		{"ps", floatCol(p.PS)}, {"logit_ps", floatCol(p.LogitPS)}, {"in_support", boolCol(p.InSupport)}}
	if err := w.appendRows(ctx, o.c.Schema, o.c.Scores.Name, scores, c.N()); err != nil {
		return err
	}
	if err := w.step("scores"); err != nil {
		return err
	}

	m := p.Matches
	matches := []column{run,
		{"set_id", func(i int) driver.Value { return m.SetID[i] }},
		{out.Unit, func(i int) driver.Value { return unit(m.Unit[i]) }},
		{"treated", boolCol(m.Treated)},
		{"set_weight", floatCol(m.SetWeight)},
		{"match_distance", floatCol(m.Distance)},
	}
	if err := w.appendRows(ctx, o.c.Schema, o.c.Matches.Name, matches, m.Len()); err != nil {
		return err
	}
	if err := w.step("matches"); err != nil {
		return err
	}

	weights := []column{run, {out.Unit, unit}, treated}
	for k, s := range out.Schemes {
		weights = append(weights, column{s, floatCol(p.Weights[k])})
	}
	if err := w.appendRows(ctx, o.c.Schema, o.c.Weights.Name, weights, c.N()); err != nil {
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
