package sqlcore

import (
	"context"
	"fmt"
	"strings"

	"counterpart/warehouse"
)

// BulkCol is one column a bulk write streams, columnar. Exactly one of
// F64, I64, B, S or Codes is set; Idx, when set, makes row r read element
// Idx[r] (matches rows point into the cohort's unit ids).
type BulkCol struct {
	Name string
	F64  []float64 // NaN is written as NULL
	I64  []int64
	B    []bool
	S    []string
	// Codes index Levels: a categorical column written as its level text.
	Codes  []int32
	Levels []string
	Idx    []int
}

// At is the element row r reads.
func (c *BulkCol) At(r int) int {
	if c.Idx != nil {
		return c.Idx[r]
	}
	return r
}

// BulkNames is the quoted column list of a bulk write: run_id first
// unless runID is "", then the columns of cols in order.
func BulkNames(runID string, cols []BulkCol) string {
	var names []string
	if runID != "" {
		names = append(names, "run_id")
	}
	for _, c := range cols {
		names = append(names, warehouse.Quote(c.Name))
	}
	return strings.Join(names, ", ")
}

// unitCol is the unit id column of cohort c, indexed by idx when set.
func unitCol(name string, c *warehouse.Cohort, idx []int) BulkCol {
	if c.IDKind == warehouse.IDInt {
		return BulkCol{Name: name, I64: c.IntIDs, Idx: idx}
	}
	return BulkCol{Name: name, S: c.TextIDs, Idx: idx}
}

// writeAll writes the cohort snapshot, scores, matches and weights of p.
func (c *Core) writeAll(ctx context.Context, o *warehouse.Objects, out warehouse.Output, p *warehouse.Publication) error {
	ch := p.Cohort
	cohort := []BulkCol{unitCol(out.Unit, ch, nil), {Name: out.Treatment, B: ch.Treated}}
	covs := map[string]*warehouse.Covariate{}
	for i := range ch.Covariates {
		covs[ch.Covariates[i].Name] = &ch.Covariates[i]
	}
	for _, m := range out.Covariates {
		cv := covs[m.Name]
		if m.Kind == warehouse.Categorical {
			cohort = append(cohort, BulkCol{Name: m.Name, Codes: cv.Codes, Levels: cv.Levels})
		} else {
			cohort = append(cohort, BulkCol{Name: m.Name, F64: cv.Values})
		}
	}
	outcomes := map[string][]float64{}
	for _, oc := range ch.Outcomes {
		outcomes[oc.Name] = oc.Values
	}
	for _, name := range out.Outcomes {
		cohort = append(cohort, BulkCol{Name: name, F64: outcomes[name]})
	}
	treated := BulkCol{Name: "treated", B: ch.Treated}
	scores := []BulkCol{unitCol(out.Unit, ch, nil), treated,
		{Name: "ps", F64: p.PS}, {Name: "logit_ps", F64: p.LogitPS}, {Name: "in_support", B: p.InSupport}}
	weights := []BulkCol{unitCol(out.Unit, ch, nil), treated}
	for k, s := range out.Schemes {
		weights = append(weights, BulkCol{Name: s, F64: p.Weights[k]})
	}
	for _, t := range []struct {
		table, step string
		cols        []BulkCol
	}{{o.Cohort, "cohort", cohort}, {o.Scores, "scores", scores}, {"", "matches", nil}, {o.Weights, "weights", weights}} {
		var err error
		if t.table == "" {
			err = c.writeMatches(ctx, o, out, p.Run.RunID, ch, p.Matches)
		} else {
			err = c.bulk(ctx, t.table, p.Run.RunID, t.cols, ch.N())
		}
		if err != nil {
			return err
		}
		if err := c.step(t.step); err != nil {
			return err
		}
	}
	return nil
}

// writeMatches writes the match rows; their unit ids come from ids.
func (c *Core) writeMatches(ctx context.Context, o *warehouse.Objects, out warehouse.Output, runID string, ids *warehouse.Cohort, m warehouse.MatchRows) error {
	if m.Len() == 0 {
		return nil
	}
	cols := []BulkCol{{Name: "set_id", I64: m.SetID}, unitCol(out.Unit, ids, m.Unit), {Name: "treated", B: m.Treated},
		{Name: "set_weight", F64: m.SetWeight}, {Name: "match_distance", F64: m.Distance}}
	return c.bulk(ctx, o.Matches, runID, cols, m.Len())
}

// writeSurvival writes the Kaplan–Meier steps of the time-to-event
// outcomes, columnar.
func (c *Core) writeSurvival(ctx context.Context, o *warehouse.Objects, runID string, steps []warehouse.SurvivalStep) error {
	if len(steps) == 0 {
		return nil
	}
	if o.Survival == "" {
		return fmt.Errorf("survival rows for a study without time-to-event outcomes (Output.TimeToEvent is false)")
	}
	n := len(steps)
	outcome, adj := make([]string, n), make([]string, n)
	treated := make([]bool, n)
	f := make([][]float64, 6)
	for k := range f {
		f[k] = make([]float64, n)
	}
	for i, s := range steps {
		outcome[i], adj[i], treated[i] = s.Outcome, s.Adjustment, s.Treated
		for k, v := range []float64{s.Time, s.AtRisk, s.Events, s.Censored, s.Survival, s.StdError} {
			f[k][i] = v
		}
	}
	cols := []BulkCol{{Name: "outcome", S: outcome}, {Name: "adjustment", S: adj}, {Name: "treated", B: treated},
		{Name: "time", F64: f[0]}, {Name: "at_risk", F64: f[1]}, {Name: "events", F64: f[2]},
		{Name: "censored", F64: f[3]}, {Name: "survival", F64: f[4]}, {Name: "std_error", F64: f[5]}}
	return c.bulk(ctx, o.Survival, runID, cols, n)
}

func (c *Core) bulk(ctx context.Context, table, runID string, cols []BulkCol, n int) error {
	if err := c.A.Bulk(ctx, table, runID, cols, n); err != nil {
		return fmt.Errorf("write %s: %w", table, c.err(err))
	}
	return nil
}
