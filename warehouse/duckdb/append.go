package duckdb

import (
	"context"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
)

// appendAll writes the cohort snapshot, scores, matches and weights of p
// through bulk inserts (see bulk.go).
func (w *Warehouse) appendAll(ctx context.Context, o *warehouse.Objects, out warehouse.Output, p *warehouse.Publication) error {
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
	if err := w.insertBulk(ctx, o.C.Schema, o.C.Cohort.Name, run, cohort, c.N()); err != nil {
		return err
	}
	if err := w.step("cohort"); err != nil {
		return err
	}

	scores := []bulkTarget{{name: out.Unit, col: unitCol(nil)}, {name: "treated", col: boolean(c.Treated)},
		{name: "ps", col: f64(p.PS)}, {name: "logit_ps", col: f64(p.LogitPS)}, {name: "in_support", col: boolean(p.InSupport)}}
	if err := w.insertBulk(ctx, o.C.Schema, o.C.Scores.Name, run, scores, c.N()); err != nil {
		return err
	}
	if err := w.step("scores"); err != nil {
		return err
	}

	if p.Matches.Len() > 0 {
		if err := w.appendMatches(ctx, o, out, p); err != nil {
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
	if err := w.insertBulk(ctx, o.C.Schema, o.C.Weights.Name, run, weights, c.N()); err != nil {
		return err
	}
	return w.step("weights")
}

// appendMatches writes p's match rows; their unit ids come from p.Cohort.
func (w *Warehouse) appendMatches(ctx context.Context, o *warehouse.Objects, out warehouse.Output, p *warehouse.Publication) error {
	c, m := p.Cohort, p.Matches
	unit := &bulkCol{s: c.TextIDs, idx: m.Unit, kind: duckdb.TYPE_VARCHAR}
	if c.IDKind == warehouse.IDInt {
		unit = &bulkCol{i64: c.IntIDs, idx: m.Unit, kind: duckdb.TYPE_BIGINT}
	}
	matches := []bulkTarget{
		{name: "set_id", col: &bulkCol{i64: m.SetID, kind: duckdb.TYPE_BIGINT}},
		{name: out.Unit, col: unit},
		{name: "treated", col: &bulkCol{b: m.Treated, kind: duckdb.TYPE_BOOLEAN}},
		{name: "set_weight", col: &bulkCol{f64: m.SetWeight, kind: duckdb.TYPE_DOUBLE}},
		{name: "match_distance", col: &bulkCol{f64: m.Distance, kind: duckdb.TYPE_DOUBLE}},
	}
	return w.insertBulk(ctx, o.C.Schema, o.C.Matches.Name, p.Run.RunID, matches, m.Len())
}
