package warehouse

import (
	"context"
	"fmt"
	"math"
	"strings"
)

// Statement is one SQL statement and the values bound to its
// parameters, in order.
type Statement struct {
	SQL  string
	Args []any
}

// ScalePublisher is the optional engine interface of warehouse-scale
// publishing (score.fit_in: warehouse): BeginScale opens the publish
// transaction as a ScaleTx, which the caller drives in order.
type ScalePublisher interface {
	BeginScale(ctx context.Context, out Output, runID string) (ScaleTx, error)
}

// ScaleTx is one warehouse-scale publish transaction, on the engine's
// one session: WriteMatches, WriteSnapshot, WriteScores, RunSums, Finish,
// then Commit. Rollback undoes it whatever was done (and is a no-op after
// Commit); every row and the run's final status become visible together
// or not at all. The runs row must exist (StartRun).
type ScaleTx interface {
	// WriteMatches writes the match rows; ids holds only the unit ids
	// and the treatment the rows point at.
	WriteMatches(ctx context.Context, ids *Cohort, rows MatchRows) error
	// WriteSnapshot writes the cohort snapshot from the cohort query by
	// INSERT … SELECT (SnapshotSQL).
	WriteSnapshot(ctx context.Context, q CohortQuery, d *DesignSQL) error
	// WriteScores writes the scores and weights rows (InWarehouse.ScoreInto).
	WriteScores(ctx context.Context, q CohortQuery, d *DesignSQL, coef []float64, sup Support, schemes []string) error
	// RunSums reads the balance and effect sums of the rows written so
	// far (RunSumsSQL, and MatchedSumsSQL when spec.Matched).
	RunSums(ctx context.Context, spec RunSums) (*Sums, error)
	// Finish writes p.Run as the final runs row, p.Effects, retention and
	// the views.
	Finish(ctx context.Context, p *Publication) error
	Commit(ctx context.Context) error
	Rollback(ctx context.Context)
}

// SnapshotSQL returns the INSERT … SELECT that writes the run's cohort
// snapshot from the cohort query ($1 is the run id), with the column types
// and meaning of the in-memory snapshot: the unit id as is, the treatment
// as a boolean, numeric covariates as DOUBLE PRECISION, categorical ones
// as their level text (CAST … AS VARCHAR, the text ReadCohort's levels
// have), outcomes as DOUBLE PRECISION with booleans as 0/1. outcomeBool
// says which outcomes are boolean columns (Postgres casts no boolean to
// a float).
func SnapshotSQL(c *Contract, q CohortQuery, d *DesignSQL, covKinds []CovKind, outcomeBool []bool) (string, error) {
	if len(covKinds) != len(q.Covariates) || len(outcomeBool) != len(q.Outcomes) {
		panic(fmt.Sprintf("warehouse: snapshot: %d kinds for %d covariates, %d flags for %d outcomes", len(covKinds), len(q.Covariates), len(outcomeBool), len(q.Outcomes)))
	}
	names := []string{"run_id", Quote(c.Unit), Quote(c.Treatment)}
	exprs := []string{"CAST($1 AS VARCHAR)", "c." + Quote(q.Unit), "(" + d.TreatmentExpr() + ") = 1"}
	for i, name := range q.Covariates {
		if err := ValidIdent(name); err != nil {
			return "", fmt.Errorf("cohort.covariates: %w", err)
		}
		names = append(names, Quote(name))
		if covKinds[i] == Categorical {
			exprs = append(exprs, "CAST(c."+Quote(name)+" AS VARCHAR)")
		} else {
			exprs = append(exprs, "CAST(c."+Quote(name)+" AS DOUBLE PRECISION)")
		}
	}
	for i, name := range q.Outcomes {
		if err := ValidIdent(name); err != nil {
			return "", fmt.Errorf("cohort.outcomes: %w", err)
		}
		names = append(names, Quote(name))
		y := "c." + Quote(name)
		if outcomeBool[i] {
			exprs = append(exprs, "CASE WHEN "+y+" THEN 1.0 WHEN NOT "+y+" THEN 0.0 END")
		} else {
			exprs = append(exprs, "CAST("+y+" AS DOUBLE PRECISION)")
		}
	}
	return fmt.Sprintf("INSERT INTO %s (%s)\nSELECT %s FROM %s",
		QuoteQualified(c.Schema, c.Cohort.Name), strings.Join(names, ", "), strings.Join(exprs, ", "), From(q.SQL)), nil
}

// MatchedWidth is the number of MatchedSumsSQL columns per outcome.
const MatchedWidth = 20

// MatchedSumsSQL returns, for each outcome over a run's matched rows
// (matches joined to the cohort snapshot once, $1 the run id; w =
// set_weight), first the sums of each matched set g over its usable rows
// (w > 0, outcome present),
//
//	A_gT = Σ_{g,T} w·y   B_gT = Σ_{g,T} w   A_gC = Σ_{g,C} w·y   B_gC = Σ_{g,C} w,
//
// then one row of sums over the sets, MatchedWidth columns per outcome in
// order: G (sets with a usable row), rows used and missing per arm, ΣB_T,
// ΣA_T, ΣB_C, ΣA_C, the ten products Σ A_T², Σ A_T·B_T, Σ B_T², Σ A_C²,
// Σ A_C·B_C, Σ B_C², Σ A_T·A_C, Σ A_T·B_C, Σ B_T·A_C, Σ B_T·B_C, and the
// count of used outcomes other than 0 and 1. The inner GROUP BY set_id
// and the outer sums are plain aggregates (a distributed engine shuffles
// on set_id once).
func MatchedSumsSQL(c *Contract, outcomes []string) (string, error) {
	ys := make([]string, len(outcomes))
	for i, o := range outcomes {
		if err := ValidIdent(o); err != nil {
			return "", fmt.Errorf("outcome: %w", err)
		}
		ys[i] = fmt.Sprintf("CAST(c.%s AS DOUBLE PRECISION) AS y%d", Quote(o), i+1)
	}
	rows := "SELECT m.set_id AS g, m.treated AS t, CAST(m.set_weight AS DOUBLE PRECISION) AS w, " + strings.Join(ys, ", ") + " FROM " +
		QuoteQualified(c.Schema, c.Matches.Name) + " m JOIN " + QuoteQualified(c.Schema, c.Cohort.Name) + " c ON c.run_id = m.run_id AND c." + Quote(c.Unit) + " = m." + Quote(c.Unit) +
		" WHERE m.run_id = CAST($1 AS VARCHAR) AND m.set_weight > 0"
	var per []string
	for i := range outcomes {
		y := fmt.Sprintf("y%d", i+1)
		r := func(name string) string { return fmt.Sprintf("%s_%d", name, i+1) }
		// Per set: counts, and Σw·y and Σw per arm, each an exact sum
		// turned into a double by a fixed expression (the same whatever
		// order the set's rows were added in).
		in := &sumSet{}
		in.sum("CASE WHEN t THEN w * "+y+" END", rawScale)
		in.sum("CASE WHEN t AND "+y+" IS NOT NULL THEN w END", rawScale)
		in.sum("CASE WHEN NOT t THEN w * "+y+" END", rawScale)
		in.sum("CASE WHEN NOT t AND "+y+" IS NOT NULL THEN w END", rawScale)
		per = append(per,
			"sum(CASE WHEN t AND "+y+" IS NOT NULL THEN 1 ELSE 0 END) AS "+r("nt"), "sum(CASE WHEN NOT t AND "+y+" IS NOT NULL THEN 1 ELSE 0 END) AS "+r("nc"),
			"sum(CASE WHEN t AND "+y+" IS NULL THEN 1 ELSE 0 END) AS "+r("mt"), "sum(CASE WHEN NOT t AND "+y+" IS NULL THEN 1 ELSE 0 END) AS "+r("mc"),
			in.doubleExpr(0)+" AS "+r("sat"), in.doubleExpr(1)+" AS "+r("sbt"),
			in.doubleExpr(2)+" AS "+r("sac"), in.doubleExpr(3)+" AS "+r("sbc"),
			"sum(CASE WHEN "+y+" <> 0 AND "+y+" <> 1 THEN 1 ELSE 0 END) AS "+r("nb"))
	}
	sets := "SELECT g,\n  " + strings.Join(per, ",\n  ") + "\nFROM (" + rows + ") AS r GROUP BY g"
	return matchedSums(len(outcomes)).arraySQL("("+sets+") AS s", "", ""), nil
}

// matchedSums lists MatchedSumsSQL's outer sums: the number of sets,
// then MatchedWidth per outcome (DecodeMatchedSums).
func matchedSums(outcomes int) *sumSet {
	ss := &sumSet{}
	ss.count("")
	for i := range outcomes {
		r := func(name string) string { return fmt.Sprintf("%s_%d", name, i+1) }
		sat, sbt, sac, sbc := r("sat"), r("sbt"), r("sac"), r("sbc")
		ss.count(r("nt") + " + " + r("nc") + " > 0")
		ss.integer(r("nt"))
		ss.integer(r("nc"))
		ss.integer(r("mt"))
		ss.integer(r("mc"))
		for _, e := range []string{sbt, sat, sbc, sac,
			sat + " * " + sat, sat + " * " + sbt, sbt + " * " + sbt,
			sac + " * " + sac, sac + " * " + sbc, sbc + " * " + sbc,
			sat + " * " + sac, sat + " * " + sbc, sbt + " * " + sac, sbt + " * " + sbc} {
			ss.sum(e, rawScale)
		}
		ss.integer(r("nb"))
	}
	return ss
}

// DecodeMatchedSums decodes MatchedSumsSQL's one column: MatchedWidth
// values per outcome, all NaN when the run has no sets (as a float sum
// over no rows is NULL).
func DecodeMatchedSums(outcomes int, text string) ([]float64, error) {
	vals, err := matchedSums(outcomes).decode(text)
	if err != nil {
		return nil, err
	}
	if vals[0] == 0 {
		for i := range vals {
			vals[i] = math.NaN()
		}
	}
	return vals[1:], nil
}

// CovKinds returns the kind of each of q's covariates as d models it.
func (d *DesignSQL) CovKinds(q CohortQuery) []CovKind {
	kinds := make([]CovKind, len(q.Covariates))
	for i, name := range q.Covariates {
		for _, c := range d.Columns {
			if c.Source == name && c.Categorical {
				kinds[i] = Categorical
			}
		}
	}
	return kinds
}
