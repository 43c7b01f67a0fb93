package postgres

import (
	"context"
	"fmt"
	"strings"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse"
)

// Warehouse-scale mode (warehouse.InWarehouse) on Postgres. Every read
// query is one SELECT of plain aggregates over FROM (<cohort sql>) AS c,
// so the planner may run it as a parallel plan (Gather over Partial
// Aggregate, Finalize Aggregate on top) when max_parallel_workers_per_gather
// > 0 and the table is large enough (min_parallel_table_scan_size); the
// scale test checks the plan with EXPLAIN. Wrapping the query in a derived
// table is itself a check: Postgres accepts no data-modifying statement
// there (a data-modifying WITH must be at the top level), so only a query
// can run; reads run in a READ ONLY transaction besides.

var _ warehouse.InWarehouse = (*Warehouse)(nil)

// readOnlyQuery runs fn inside BEGIN READ ONLY, always rolled back.
func (w *Warehouse) readOnlyQuery(ctx context.Context, q warehouse.CohortQuery, fn func() error) error {
	if err := warehouse.CheckRoles(q); err != nil {
		return err
	}
	if strings.TrimSpace(strings.Trim(q.SQL, "; \t\r\n")) == "" {
		return fmt.Errorf("%w: cohort.sql is empty; write a SELECT that returns one row per unit", warehouse.ErrBadInput)
	}
	if _, err := w.conn.Exec(ctx, "BEGIN READ ONLY"); err != nil {
		return fmt.Errorf("begin read-only transaction: %w", w.dbErr(err))
	}
	defer w.rollback(ctx)
	return fn()
}

// scaleTypes classes the covariates from the prepared LIMIT 0 query's
// result description (nothing runs).
func (w *Warehouse) scaleTypes(ctx context.Context, q warehouse.CohortQuery) (warehouse.ColumnTypes, error) {
	var t warehouse.ColumnTypes
	sd, err := w.conn.PgConn().Prepare(ctx, "", "SELECT * FROM "+warehouse.From(q.SQL)+" LIMIT 0", nil)
	if err != nil {
		return t, fmt.Errorf("cohort.sql: %w", w.queryError(err))
	}
	types, err := w.columnTypes(ctx, sd.Fields)
	if err != nil {
		return t, err
	}
	cls := map[string]class{}
	for i, f := range sd.Fields {
		cls[f.Name] = types[i].cls
	}
	get := func(name, role string) (class, error) {
		c, ok := cls[name]
		if !ok {
			return 0, fmt.Errorf("%w: cohort.sql returns no column %s (the %s); warehouse-scale mode needs the exact column name", warehouse.ErrBadInput, name, role)
		}
		return c, nil
	}
	u, err := get(q.Unit, "unit")
	if err != nil {
		return t, err
	}
	switch u {
	case clsInt:
	case clsText:
		t.UnitText = true
	default:
		return t, fmt.Errorf("%w: unit column %s must be an integer or text", warehouse.ErrBadInput, q.Unit)
	}
	tr, err := get(q.Treatment, "treatment")
	if err != nil {
		return t, err
	}
	switch {
	case tr == clsBool:
		t.TreatmentBool = true
	case tr.numeric():
	default:
		return t, fmt.Errorf("%w: treatment column %s must be boolean or a 0/1 number", warehouse.ErrBadInput, q.Treatment)
	}
	for _, name := range q.Covariates {
		c, err := get(name, "covariate")
		if err != nil {
			return t, err
		}
		cat := warehouse.CategoricalOf(q, name)
		switch {
		case c == clsDate || c == clsOther:
			return t, fmt.Errorf("%w: covariate %s has a type warehouse-scale mode does not read; cast it to a number or text in cohort.sql", warehouse.ErrBadInput, name)
		case c == clsText || c == clsBool:
			cat = true
		}
		t.Categorical = append(t.Categorical, cat)
		t.Text = append(t.Text, c == clsText)
	}
	return t, nil
}

// Describe implements warehouse.InWarehouse.
func (w *Warehouse) Describe(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Description, error) {
	var desc *warehouse.Description
	err := w.readOnlyQuery(ctx, q, func() error {
		t, err := w.scaleTypes(ctx, q)
		if err != nil {
			return err
		}
		var arr []float64
		if err := w.conn.QueryRow(ctx, warehouse.DescribeSQL(q, t)).Scan(&arr); err != nil {
			return fmt.Errorf("describe cohort: %w", w.queryError(err))
		}
		levels := make([][]string, len(q.Covariates))
		counts := make([][]int, len(q.Covariates))
		for i, name := range q.Covariates {
			if !t.Categorical[i] {
				continue
			}
			rows, err := w.conn.Query(ctx, warehouse.LevelsSQL(q.SQL, name, t.Text[i]))
			if err != nil {
				return fmt.Errorf("levels of %s: %w", name, w.queryError(err))
			}
			var l string
			var c int64
			_, err = pgx.ForEachRow(rows, []any{&l, &c}, func() error {
				levels[i] = append(levels[i], l)
				counts[i] = append(counts[i], int(c))
				return nil
			})
			if err != nil {
				return fmt.Errorf("levels of %s: %w", name, w.queryError(err))
			}
		}
		desc, err = warehouse.NewDescription(q, t, arr, levels, counts)
		return err
	})
	return desc, err
}

// Moments implements warehouse.InWarehouse with warehouse.MomentsSQL: one
// aggregate query, parallel where the server allows it.
func (w *Warehouse) Moments(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, beta []float64, info bool) (*warehouse.Moments, error) {
	m := &warehouse.Moments{}
	err := w.readOnlyQuery(ctx, q, func() error {
		text, args := warehouse.MomentsSQL(q.SQL, d, beta, true, info)
		var n, nt, perfect float64
		var arr []float64
		if err := w.conn.QueryRow(ctx, text, args...).Scan(&n, &nt, &m.LogLik, &perfect, &arr); err != nil {
			return fmt.Errorf("moments: %w", w.queryError(err))
		}
		m.N, m.NTreated, m.Perfect = int(n), int(nt), int(perfect)
		return warehouse.SplitMoments(m, len(beta), arr, info)
	})
	if err != nil {
		return nil, err
	}
	return m, nil
}

// LogitRange implements warehouse.InWarehouse.
func (w *Warehouse) LogitRange(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64) (*warehouse.LogitRange, error) {
	r := &warehouse.LogitRange{}
	err := w.readOnlyQuery(ctx, q, func() error {
		text, args := warehouse.LogitRangeSQL(q.SQL, d, coef)
		if err := w.conn.QueryRow(ctx, text, args...).Scan(&r.Min[0], &r.Max[0], &r.Min[1], &r.Max[1]); err != nil {
			return fmt.Errorf("logit range: %w", w.queryError(err))
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return r, nil
}

// ScoreInto implements warehouse.InWarehouse. Its INSERT … SELECT
// statements run on the session without BEGIN or COMMIT, so they join the
// publish transaction it is called in. (Postgres plans INSERT … SELECT
// serially; the statement is still one pass inside the server.)
func (w *Warehouse) ScoreInto(ctx context.Context, out warehouse.Output, runID string, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, schemes []string) error {
	if err := w.writable("score into"); err != nil {
		return err
	}
	if err := warehouse.CheckRoles(q); err != nil {
		return err
	}
	c, err := warehouse.NewContract(out)
	if err != nil {
		return err
	}
	stmts, args, err := warehouse.ScoreInsertSQL(c, q.SQL, d, coef, sup, schemes, true)
	if err != nil {
		return err
	}
	for i, s := range stmts {
		args[i][0] = runID
		if _, err := w.conn.Exec(ctx, s, args[i]...); err != nil {
			return fmt.Errorf("score into %s: %w", strings.Fields(s)[2], w.queryError(err))
		}
	}
	return nil
}

// MatchInput implements warehouse.InWarehouse, rows in unit order.
func (w *Warehouse) MatchInput(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, exactOn []string) (*warehouse.MatchInput, error) {
	mi := &warehouse.MatchInput{IDKind: d.IDKind}
	err := w.readOnlyQuery(ctx, q, func() error {
		text, args, err := warehouse.MatchInputSQL(q.SQL, d, coef, sup, exactOn, true)
		if err != nil {
			return err
		}
		rows, err := w.conn.Query(ctx, text, args...)
		if err != nil {
			return fmt.Errorf("match input: %w", w.queryError(err))
		}
		var id int64
		var tid string
		var z, in bool
		var st int32
		var eta float64
		unit := any(&id)
		if d.IDKind == warehouse.IDText {
			unit = &tid
		}
		_, err = pgx.ForEachRow(rows, []any{unit, &z, &st, &eta, &in}, func() error {
			if d.IDKind == warehouse.IDText {
				mi.TextIDs = append(mi.TextIDs, tid)
			} else {
				mi.IntIDs = append(mi.IntIDs, id)
			}
			mi.Treated = append(mi.Treated, z)
			mi.Stratum = append(mi.Stratum, st)
			mi.Logit = append(mi.Logit, eta)
			mi.InSupport = append(mi.InSupport, in)
			mi.Strata = max(mi.Strata, int(st)+1)
			return nil
		})
		if err != nil {
			return fmt.Errorf("match input: %w", w.queryError(err))
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return mi, nil
}
