package sqlcore

import (
	"context"
	"fmt"

	"counterpart/warehouse"
)

// BeginScale implements warehouse.ScalePublisher: it opens the publish
// transaction of a warehouse-scale run.
func (c *Core) BeginScale(ctx context.Context, out warehouse.Output, runID string) (warehouse.ScaleTx, error) {
	if err := c.writable(); err != nil {
		return nil, err
	}
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return nil, err
	}
	if _, err := c.Exec(ctx, "begin", "BEGIN TRANSACTION"); err != nil {
		return nil, err
	}
	if err := c.ensureObjects(ctx, o, out); err != nil {
		c.Rollback(ctx)
		return nil, err
	}
	if err := c.createPartitions(ctx, o, runID, c.runTables); err != nil {
		c.Rollback(ctx)
		return nil, err
	}
	return &scaleTx{c: c, o: o, out: out, runID: runID}, nil
}

// scaleTx is one warehouse-scale publish transaction on the engine's
// session. Any error leaves it for Rollback.
type scaleTx struct {
	c     *Core
	o     *warehouse.Objects
	out   warehouse.Output
	runID string
	done  bool
}

func (t *scaleTx) WriteMatches(ctx context.Context, ids *warehouse.Cohort, rows warehouse.MatchRows) error {
	p := &warehouse.Publication{Run: warehouse.RunRecord{RunID: t.runID, Status: warehouse.StatusSucceeded}, Cohort: ids, Matches: rows}
	if err := warehouse.CheckScalePublication(t.out, p); err != nil {
		return err
	}
	if err := t.c.writeMatches(ctx, t.o, t.out, t.runID, ids, rows); err != nil {
		return err
	}
	return t.c.step("matches")
}

func (t *scaleTx) WriteSnapshot(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL) error {
	ct, err := t.c.scaleWrite(ctx, t.out, q)
	if err != nil {
		return err
	}
	types, err := t.c.scaleTypes(ctx, q)
	if err != nil {
		return err
	}
	text, err := warehouse.SnapshotSQL(ct, q, d, d.CovKinds(q), types.OutcomeBool)
	if err != nil {
		return err
	}
	if _, err := t.c.A.Exec(ctx, text, t.runID); err != nil {
		return fmt.Errorf("snapshot into %s: %w", ct.Cohort.Name, t.c.queryErr(err))
	}
	return nil
}

func (t *scaleTx) WriteScores(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, schemes []string) error {
	return t.c.ScoreInto(ctx, t.out, t.runID, q, d, coef, sup, schemes)
}

// RunSums reads the run's categorical levels from its snapshot, makes
// RunSumsSQL's one pass over the rows written so far and, with matched
// sets and outcomes, MatchedSumsSQL's pass over the matches.
func (t *scaleTx) RunSums(ctx context.Context, spec warehouse.RunSums) (*warehouse.Sums, error) {
	c, ct := t.c, t.o.C
	spec.Levels = make([][]string, len(spec.Covariates))
	text, err := warehouse.BalanceLevelsSQL(ct, spec.Covariates)
	if err != nil {
		return nil, err
	}
	if text != "" {
		var i int64
		var level string
		err := c.eachQuery(ctx, text, []any{t.runID}, []any{&i, &level}, func() error {
			if i < 0 || int(i) >= len(spec.Covariates) {
				return fmt.Errorf("covariate %d of %d", i, len(spec.Covariates))
			}
			spec.Levels[i] = append(spec.Levels[i], level)
			return nil
		})
		if err != nil {
			return nil, fmt.Errorf("balance levels: %w", err)
		}
	}
	arms, err := t.runSums(ctx, ct, spec)
	if err != nil {
		return nil, err
	}
	var matched []float64
	if spec.Matched && len(spec.Outcomes) > 0 {
		text, err := warehouse.MatchedSumsSQL(ct, spec.Outcomes)
		if err != nil {
			return nil, err
		}
		var sums string
		found, err := c.query(ctx, text, []any{t.runID}, &sums)
		if err == nil && !found {
			err = fmt.Errorf("no row of sums")
		}
		if err == nil {
			matched, err = warehouse.DecodeMatchedSums(len(spec.Outcomes), sums)
		}
		if err != nil {
			return nil, fmt.Errorf("matched effect sums: %w", err)
		}
	}
	return warehouse.NewSums(spec, arms, matched), nil
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// Finish writes the final runs row (p.Run), the effects, retention and
// the views.
func (t *scaleTx) Finish(ctx context.Context, p *warehouse.Publication) error {
	if err := t.c.step("in-warehouse"); err != nil {
		return err
	}
	switch p.Run.Status {
	case warehouse.StatusSucceeded, warehouse.StatusRejected, warehouse.StatusFailed, warehouse.StatusSkipped:
	default:
		return fmt.Errorf("run %s: final status %q is not one of succeeded, rejected, failed, skipped", p.Run.RunID, p.Run.Status)
	}
	return t.c.finish(ctx, t.o, t.out, p, nil)
}

func (t *scaleTx) Commit(ctx context.Context) error {
	if err := t.c.commit(ctx); err != nil {
		return err
	}
	t.done = true
	return nil
}

func (t *scaleTx) Rollback(ctx context.Context) {
	if !t.done {
		t.done = true
		t.c.Rollback(ctx)
	}
}

// runSums makes RunSumsSQL's pass, one row of sums per arm. With the
// cohort partitioned (spec.Cohort.Partition), the unadjusted and
// weighted sums are made from the cohort query, so that each node of a
// distributed engine sums its own rows, and the matched sums, which join
// the run's sets on the coordinator, from the snapshot in a second pass;
// the rows are the same units with the same values, so the spliced row is
// the one pass's row.
func (t *scaleTx) runSums(ctx context.Context, ct *warehouse.Contract, spec warehouse.RunSums) ([2][]float64, error) {
	if spec.Cohort == nil || t.c.partitioned(*spec.Cohort).Partition == "" {
		spec.Cohort = nil
		return t.runSumsPass(ctx, ct, spec)
	}
	cohort := spec
	cohort.Matched = false
	types, err := t.c.scaleTypes(ctx, *spec.Cohort)
	if err != nil {
		return [2][]float64{}, err
	}
	isBool := map[string]bool{}
	for i, name := range spec.Cohort.Outcomes {
		isBool[name] = types.OutcomeBool[i]
	}
	cohort.OutcomeBool = make([]bool, len(spec.Outcomes))
	for i, name := range spec.Outcomes {
		cohort.OutcomeBool[i] = isBool[name]
	}
	arms, err := t.runSumsPass(ctx, ct, cohort)
	if err != nil || !spec.Matched {
		return arms, err
	}
	matched := spec
	matched.Cohort, matched.Schemes, matched.Outcomes = nil, nil, nil
	marms, err := t.runSumsPass(ctx, ct, matched)
	if err != nil {
		return arms, err
	}
	bw := spec.BalanceWidth()
	for g := range arms {
		if arms[g] == nil && marms[g] == nil {
			continue
		}
		if arms[g] == nil {
			arms[g] = make([]float64, cohort.Adjustments()*bw+len(spec.Outcomes)*spec.EffectAdjustments()*warehouse.EffectWidth)
		}
		m := marms[g]
		if m == nil {
			m = make([]float64, 2*bw)
		}
		// Adjustment order: unadjusted, matched, then the schemes.
		row := append(append(append([]float64(nil), arms[g][:bw]...), m[bw:2*bw]...), arms[g][bw:]...)
		arms[g] = row
	}
	return arms, nil
}

// runSumsPass runs one RunSumsSQL pass and decodes its rows by arm.
func (t *scaleTx) runSumsPass(ctx context.Context, ct *warehouse.Contract, spec warehouse.RunSums) ([2][]float64, error) {
	c := t.c
	spec.Decimal = false // count the integer parts' aggregates
	spec.Decimal = c.D.Inlines && warehouse.RunSumsAggregates(spec) > warehouse.MaxAggregates
	var arms [2][]float64
	text, args, err := warehouse.RunSumsSQL(ct, spec, c.D.Inlines)
	if err != nil {
		return arms, err
	}
	if spec.Cohort == nil {
		args[0] = t.runID
	}
	var treated bool
	var sums string
	err = c.eachQuery(ctx, text, args, []any{&treated, &sums}, func() error {
		v, err := warehouse.DecodeRunSums(spec, sums)
		if err != nil {
			return err
		}
		arms[b2i(treated)] = v
		return nil
	})
	if err != nil {
		return arms, fmt.Errorf("balance and effect sums: %w", err)
	}
	return arms, nil
}
