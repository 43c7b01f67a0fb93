package sqlcore

import (
	"context"
	"fmt"
	"strings"

	"counterpart/warehouse"
)

// Warehouse-scale mode (warehouse.InWarehouse): the model is fitted from
// one aggregate query per Newton step and scores and weights are written
// with INSERT … SELECT, so only k×k numbers and, for matching, three
// columns per unit leave the engine.

// scaleTypes classes the covariates from the result's metadata (nothing
// is read).
func (c *Core) scaleTypes(ctx context.Context, q warehouse.CohortQuery) (warehouse.ColumnTypes, error) {
	var t warehouse.ColumnTypes
	cols, err := c.A.Columns(ctx, q.SQL)
	if err != nil {
		return t, err
	}
	cls := map[string]Class{}
	for _, col := range cols {
		cls[col.Name] = col.Class
	}
	get := func(name, role string) (Class, error) {
		k, ok := cls[name]
		if !ok {
			return 0, fmt.Errorf("%w: cohort.sql returns no column %s (the %s); warehouse-scale mode needs the exact column name", warehouse.ErrBadInput, name, role)
		}
		return k, nil
	}
	u, err := get(q.Unit, "unit")
	if err != nil {
		return t, err
	}
	switch u {
	case ClassInt:
	case ClassText:
		t.UnitText = true
	default:
		return t, fmt.Errorf("%w: unit column %s must be an integer or text", warehouse.ErrBadInput, q.Unit)
	}
	tr, err := get(q.Treatment, "treatment")
	if err != nil {
		return t, err
	}
	switch {
	case tr == ClassBool:
		t.TreatmentBool = true
	case tr.numeric() && tr != ClassNull:
	default:
		return t, fmt.Errorf("%w: treatment column %s must be boolean or a 0/1 number", warehouse.ErrBadInput, q.Treatment)
	}
	for _, name := range q.Covariates {
		k, err := get(name, "covariate")
		if err != nil {
			return t, err
		}
		cat := warehouse.CategoricalOf(q, name)
		switch {
		case k == ClassDate || k == ClassOther || k == ClassNull:
			return t, fmt.Errorf("%w: covariate %s has a type warehouse-scale mode does not read; cast it to a number or text in cohort.sql", warehouse.ErrBadInput, name)
		case k == ClassText || k == ClassBool:
			cat = true
		}
		t.Categorical = append(t.Categorical, cat)
		t.Text = append(t.Text, k == ClassText)
		t.Bool = append(t.Bool, k == ClassBool)
	}
	for _, name := range q.Outcomes {
		t.OutcomeBool = append(t.OutcomeBool, cls[name] == ClassBool)
	}
	if q.Partition != "" {
		if _, err := get(q.Partition, "cohort.partition_column"); err != nil {
			return t, err
		}
	}
	return t, nil
}

// Describe implements warehouse.InWarehouse: one metadata query for the
// types, one aggregate, and one GROUP BY per categorical covariate.
func (c *Core) Describe(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Description, error) {
	var desc *warehouse.Description
	err := c.readOnly(ctx, q, func() error {
		t, err := c.scaleTypes(ctx, q)
		if err != nil {
			return err
		}
		var arr []float64
		var sums string
		if _, err := c.query(ctx, warehouse.DescribeSQL(q, t, c.D.Inlines), nil, &arr, &sums); err != nil {
			return fmt.Errorf("describe cohort: %w", err)
		}
		levels := make([][]string, len(q.Covariates))
		counts := make([][]int, len(q.Covariates))
		for i, name := range q.Covariates {
			if !t.Categorical[i] {
				continue
			}
			var l string
			var n int64
			err := c.eachQuery(ctx, warehouse.LevelsSQL(q.SQL, name, t.Text[i]), nil, []any{&l, &n}, func() error {
				levels[i] = append(levels[i], l)
				counts[i] = append(counts[i], int(n))
				return nil
			})
			if err != nil {
				return fmt.Errorf("levels of %s: %w", name, err)
			}
		}
		desc, err = warehouse.NewDescription(q, t, arr, sums, warehouse.DescribeDecimal(q, t), levels, counts)
		return err
	})
	return desc, err
}

// query and eachQuery are QueryRow and Each for queries over the
// analyst's SQL, whose errors may be the study's fault.
func (c *Core) query(ctx context.Context, text string, args []any, dest ...any) (bool, error) {
	return c.first(ctx, c.queryErr, text, args, dest)
}

func (c *Core) eachQuery(ctx context.Context, text string, args, dest []any, fn func() error) error {
	return c.each(ctx, c.queryErr, text, args, dest, fn)
}

// Moments implements warehouse.InWarehouse with warehouse.MomentsSQL.
func (c *Core) Moments(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, beta []float64, info bool) (*warehouse.Moments, error) {
	m := &warehouse.Moments{}
	err := c.readOnly(ctx, q, func() error {
		pq := c.partitioned(q)
		text, args := warehouse.MomentsSQL(pq, d, beta, c.D.Inlines, info)
		var sums string
		if _, err := c.query(ctx, text, args, &sums); err != nil {
			return fmt.Errorf("moments: %w", err)
		}
		return warehouse.SplitMoments(m, len(beta), sums, info, c.D.Inlines, pq.Partition != "")
	})
	if err != nil {
		return nil, err
	}
	return m, nil
}

func deref(f *float64) float64 {
	if f == nil {
		return 0
	}
	return *f
}

// LogitRange implements warehouse.InWarehouse.
func (c *Core) LogitRange(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64) (*warehouse.LogitRange, error) {
	r := &warehouse.LogitRange{}
	err := c.readOnly(ctx, q, func() error {
		text, args := warehouse.LogitRangeSQL(c.partitioned(q), d, coef)
		if _, err := c.query(ctx, text, args, &r.Min[0], &r.Max[0], &r.Min[1], &r.Max[1]); err != nil {
			return fmt.Errorf("logit range: %w", err)
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return r, nil
}

// ScoreInto implements warehouse.InWarehouse. Its INSERT … SELECT
// statements run on the session without beginning or ending a
// transaction, so they join the publish transaction it is called in.
func (c *Core) ScoreInto(ctx context.Context, out warehouse.Output, runID string, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, schemes []string) error {
	ct, err := c.scaleWrite(ctx, out, q)
	if err != nil {
		return err
	}
	if c.D.RunPartitions {
		// Called on its own (not through BeginScale, which attached
		// them), the run may lack its partitions of the scores and
		// weights tables the INSERTs write through.
		o, err := warehouse.NewObjects(out)
		if err != nil {
			return err
		}
		if err := c.startPartitions(ctx, o, runID); err != nil {
			return err
		}
	}
	stmts, err := warehouse.ScoreInsertSQL(ct, runID, q.SQL, d, coef, sup, schemes, c.D.Inlines)
	if err != nil {
		return err
	}
	for _, s := range stmts {
		if _, err := c.A.Exec(ctx, s.SQL, s.Args...); err != nil {
			return fmt.Errorf("score into %s: %w", strings.Fields(s.SQL)[2], c.queryErr(err))
		}
	}
	return nil
}

// scaleWrite checks a write from the cohort query inside the publish
// transaction.
func (c *Core) scaleWrite(ctx context.Context, out warehouse.Output, q warehouse.CohortQuery) (*warehouse.Contract, error) {
	if err := c.writable(); err != nil {
		return nil, err
	}
	if err := warehouse.CheckRoles(q); err != nil {
		return nil, err
	}
	if err := c.A.CheckSelect(ctx, q.SQL); err != nil {
		return nil, err
	}
	return warehouse.NewContract(out)
}

// MatchInput implements warehouse.InWarehouse, rows in unit order.
func (c *Core) MatchInput(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, exactOn []string) (*warehouse.MatchInput, error) {
	mi := &warehouse.MatchInput{IDKind: d.IDKind}
	err := c.readOnly(ctx, q, func() error {
		text, args, err := warehouse.MatchInputSQL(q.SQL, d, coef, sup, exactOn, c.D.Inlines)
		if err != nil {
			return err
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
		err = c.eachQuery(ctx, text, args, []any{unit, &z, &st, &eta, &in}, func() error {
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
			return fmt.Errorf("match input: %w", err)
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return mi, nil
}

// UnitColumns implements warehouse.InWarehouse, rows in unit order.
func (c *Core) UnitColumns(ctx context.Context, q warehouse.CohortQuery) ([][]float64, error) {
	out := make([][]float64, len(q.Outcomes))
	err := c.readOnly(ctx, q, func() error {
		t, err := c.scaleTypes(ctx, q)
		if err != nil {
			return err
		}
		text, err := warehouse.UnitColumnsSQL(q, t.OutcomeBool)
		if err != nil {
			return err
		}
		vals := make([]float64, len(q.Outcomes))
		dest := make([]any, len(vals))
		for j := range vals {
			dest[j] = &vals[j]
		}
		err = c.eachQuery(ctx, text, nil, dest, func() error {
			for j, v := range vals {
				out[j] = append(out[j], v)
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("read outcome columns: %w", err)
		}
		return nil
	})
	if err != nil {
		return nil, err
	}
	return out, nil
}

// SampleDesign implements warehouse.Sampler with the dialect's stable
// hash of the unit id: the same set of units on every run over the same
// data.
func (c *Core) SampleDesign(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, modulus int) ([][]float64, []bool, error) {
	keep := ""
	if modulus > 1 {
		keep = c.D.SampleKeep("c."+warehouse.Quote(d.Unit), modulus)
	}
	p := len(d.Columns)
	x := make([][]float64, p)
	var z []bool
	err := c.readOnly(ctx, q, func() error {
		text, args := warehouse.SampleSQL(q.SQL, d, keep)
		var zi int64
		vals := make([]float64, p)
		ptrs := make([]any, p+1)
		ptrs[0] = &zi
		for j := range vals {
			ptrs[j+1] = &vals[j]
		}
		err := c.eachQuery(ctx, text, args, ptrs, func() error {
			z = append(z, zi == 1)
			for j, v := range vals {
				x[j] = append(x[j], v)
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("sample: %w", err)
		}
		return nil
	})
	if err != nil {
		return nil, nil, err
	}
	return x, z, nil
}

// partitioned is q as this engine aggregates it: without the partition
// column on an engine that has one node (Dialect.Partitions).
func (c *Core) partitioned(q warehouse.CohortQuery) warehouse.CohortQuery {
	if !c.D.Partitions {
		q.Partition = ""
	}
	return q
}
