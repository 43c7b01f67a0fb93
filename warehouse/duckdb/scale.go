package duckdb

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"strings"

	"counterpart/warehouse"
)

// Warehouse-scale mode (warehouse.InWarehouse): the model is fitted from
// one aggregate query per Newton step and scores and weights are written
// with INSERT … SELECT, so only k×k numbers and, for matching, three
// columns per unit leave DuckDB. DuckDB runs each aggregate on all its
// threads (partial aggregates per thread, combined at the end).

var _ warehouse.InWarehouse = (*Warehouse)(nil)

// readOnlyQuery runs fn inside BEGIN TRANSACTION READ ONLY (rolled back)
// after checking that q.SQL is a single SELECT.
func (w *Warehouse) readOnlyQuery(ctx context.Context, q warehouse.CohortQuery, fn func() error) error {
	if err := warehouse.CheckRoles(q); err != nil {
		return err
	}
	if _, err := w.exec(ctx, "BEGIN TRANSACTION READ ONLY"); err != nil {
		return fmt.Errorf("begin read-only transaction: %w", dbErr(err))
	}
	defer w.rollback(ctx)
	if err := w.checkSelect(ctx, q.SQL); err != nil {
		return err
	}
	return fn()
}

// columnTypes classes the covariates from the result's metadata (a LIMIT
// 0 query: nothing is read).
func (w *Warehouse) scaleTypes(ctx context.Context, q warehouse.CohortQuery) (warehouse.ColumnTypes, error) {
	var t warehouse.ColumnTypes
	rows, err := w.conn.QueryContext(ctx, "SELECT * FROM "+warehouse.From(q.SQL)+" LIMIT 0")
	if err != nil {
		return t, fmt.Errorf("cohort.sql: %w", queryError(err))
	}
	defer rows.Close()
	cts, err := rows.ColumnTypes()
	if err != nil {
		return t, fmt.Errorf("cohort.sql: column types: %w", dbErr(err))
	}
	cls := map[string]class{}
	for _, ct := range cts {
		cls[ct.Name()] = classOf(ct.DatabaseTypeName())
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
	case tr.numeric() && tr != clsNull:
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
		case c == clsDate || c == clsOther || c == clsNull:
			return t, fmt.Errorf("%w: covariate %s has a type warehouse-scale mode does not read; cast it to a number or text in cohort.sql", warehouse.ErrBadInput, name)
		case c == clsText || c == clsBool:
			cat = true
		}
		t.Categorical = append(t.Categorical, cat)
		t.Text = append(t.Text, c == clsText)
	}
	return t, nil
}

// Describe implements warehouse.InWarehouse: one LIMIT 0 query for the
// types, one aggregate, and one GROUP BY per categorical covariate.
func (w *Warehouse) Describe(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Description, error) {
	var desc *warehouse.Description
	err := w.readOnlyQuery(ctx, q, func() error {
		t, err := w.scaleTypes(ctx, q)
		if err != nil {
			return err
		}
		var raw any
		if err := w.conn.QueryRowContext(ctx, warehouse.DescribeSQL(q, t)).Scan(&raw); err != nil {
			return fmt.Errorf("describe cohort: %w", queryError(err))
		}
		arr, err := floatList(raw)
		if err != nil {
			return fmt.Errorf("describe cohort: %w", err)
		}
		levels := make([][]string, len(q.Covariates))
		counts := make([][]int, len(q.Covariates))
		for i, name := range q.Covariates {
			if !t.Categorical[i] {
				continue
			}
			rows, err := w.conn.QueryContext(ctx, warehouse.LevelsSQL(q.SQL, name, t.Text[i]))
			if err != nil {
				return fmt.Errorf("levels of %s: %w", name, queryError(err))
			}
			for rows.Next() {
				var l string
				var c int64
				if err := rows.Scan(&l, &c); err != nil {
					rows.Close()
					return fmt.Errorf("levels of %s: %w", name, dbErr(err))
				}
				levels[i] = append(levels[i], l)
				counts[i] = append(counts[i], int(c))
			}
			if err := rows.Close(); err != nil {
				return fmt.Errorf("levels of %s: %w", name, dbErr(err))
			}
		}
		desc, err = warehouse.NewDescription(q, t, arr, levels, counts)
		return err
	})
	return desc, err
}

// floatList converts a DuckDB LIST of DOUBLE to []float64; NULL is NaN.
func floatList(v any) ([]float64, error) {
	l, ok := v.([]any)
	if !ok {
		return nil, fmt.Errorf("unexpected aggregate result %T", v)
	}
	out := make([]float64, len(l))
	for i, e := range l {
		switch x := e.(type) {
		case nil:
			out[i] = math.NaN()
		case float64:
			out[i] = x
		default:
			return nil, fmt.Errorf("unexpected aggregate element %T", e)
		}
	}
	return out, nil
}

// Moments implements warehouse.InWarehouse with warehouse.MomentsSQL.
func (w *Warehouse) Moments(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, beta []float64, info bool) (*warehouse.Moments, error) {
	m := &warehouse.Moments{}
	err := w.readOnlyQuery(ctx, q, func() error {
		text, args := warehouse.MomentsSQL(q.SQL, d, beta, false, info)
		var n, nt, perfect sql.NullFloat64
		var ll sql.NullFloat64
		var raw any
		if err := w.conn.QueryRowContext(ctx, text, args...).Scan(&n, &nt, &ll, &perfect, &raw); err != nil {
			return fmt.Errorf("moments: %w", queryError(err))
		}
		arr, err := floatList(raw)
		if err != nil {
			return fmt.Errorf("moments: %w", err)
		}
		m.N, m.NTreated, m.LogLik, m.Perfect = int(n.Float64), int(nt.Float64), ll.Float64, int(perfect.Float64)
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
		if err := w.conn.QueryRowContext(ctx, text, args...).Scan(&r.Min[0], &r.Max[0], &r.Min[1], &r.Max[1]); err != nil {
			return fmt.Errorf("logit range: %w", queryError(err))
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return r, nil
}

// ScoreInto implements warehouse.InWarehouse. It runs its INSERT … SELECT
// statements on the warehouse's one connection without beginning or
// ending a transaction, so they join the publish transaction it is called
// in. The cohort query is checked to be a single SELECT first.
func (w *Warehouse) ScoreInto(ctx context.Context, out warehouse.Output, runID string, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, schemes []string) error {
	if err := w.writable("score into"); err != nil {
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
	stmts, args, err := warehouse.ScoreInsertSQL(c, q.SQL, d, coef, sup, schemes, false)
	if err != nil {
		return err
	}
	for i, s := range stmts {
		args[i][0] = runID
		if _, err := w.exec(ctx, s, args[i]...); err != nil {
			return fmt.Errorf("score into %s: %w", strings.Fields(s)[2], queryError(err))
		}
	}
	return nil
}

// MatchInput implements warehouse.InWarehouse, rows in unit order.
func (w *Warehouse) MatchInput(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, exactOn []string) (*warehouse.MatchInput, error) {
	mi := &warehouse.MatchInput{IDKind: d.IDKind}
	err := w.readOnlyQuery(ctx, q, func() error {
		text, args, err := warehouse.MatchInputSQL(q.SQL, d, coef, sup, exactOn, false)
		if err != nil {
			return err
		}
		rows, err := w.conn.QueryContext(ctx, text, args...)
		if err != nil {
			return fmt.Errorf("match input: %w", queryError(err))
		}
		defer rows.Close()
		var id int64
		var tid string
		var z, in bool
		var st int32
		var eta float64
		for rows.Next() {
			var err error
			if d.IDKind == warehouse.IDText {
				err = rows.Scan(&tid, &z, &st, &eta, &in)
				mi.TextIDs = append(mi.TextIDs, tid)
			} else {
				err = rows.Scan(&id, &z, &st, &eta, &in)
				mi.IntIDs = append(mi.IntIDs, id)
			}
			if err != nil {
				return fmt.Errorf("match input: %w", dbErr(err))
			}
			mi.Treated = append(mi.Treated, z)
			mi.Stratum = append(mi.Stratum, st)
			mi.Logit = append(mi.Logit, eta)
			mi.InSupport = append(mi.InSupport, in)
			mi.Strata = max(mi.Strata, int(st)+1)
		}
		if err := rows.Err(); err != nil {
			return fmt.Errorf("match input: %w", queryError(err))
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return mi, nil
}
