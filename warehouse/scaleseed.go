package warehouse

import (
	"context"
	"fmt"
	"strings"
)

// Sampler is an optional engine interface of warehouse-scale mode: it
// returns the design columns of a small deterministic sample of the
// cohort so that the Newton iteration can start near the answer. The
// sample only seeds the iteration; every step, and the convergence test,
// still use moments over the full cohort (match/score.FitMomentsFrom), so
// the fit is the full-data estimate whatever the sample holds.
type Sampler interface {
	// SampleDesign returns, for the units whose engine hash of the unit
	// id is 0 modulo modulus (every unit when modulus ≤ 1), the design
	// columns of d on the original scale, column-major (x[j][i]), and the
	// treatment, in unit order.
	SampleDesign(ctx context.Context, q CohortQuery, d *DesignSQL, modulus int) (x [][]float64, z []bool, err error)
}

// ScaleTuner is an optional engine interface: an engine that runs inside
// the tool's process (DuckDB) lowers its own memory use for a
// warehouse-scale run, where its buffer pool would otherwise be most of
// the process's resident memory. units is the cohort's size once known (0
// before): the limit grows with it so that the publish step's joins fit.
type ScaleTuner interface {
	TuneForScale(ctx context.Context, units int) error
}

// SampleSQL returns the query of SampleDesign: z (0/1), then x1..xp on
// the original scale, over the rows of the cohort for which keep (an SQL
// condition on row c, built by the engine without parameters) holds,
// ordered by unit so the seed is the same from run to run.
func SampleSQL(cohortSQL string, d *DesignSQL, keep string) (string, []any) {
	b := &ScaleSQL{}
	parts := []string{d.TreatmentExpr() + " AS z"}
	for j, c := range d.Columns {
		parts = append(parts, fmt.Sprintf("%s AS x%d", b.rawExpr(c), j+1))
	}
	where := ""
	if keep != "" {
		where = "\nWHERE " + keep
	}
	return "SELECT " + strings.Join(parts, ",\n  ") + "\nFROM " + From(cohortSQL) + where + "\nORDER BY c." + Quote(d.Unit), b.args
}
