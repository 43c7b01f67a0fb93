package warehouse

import (
	"fmt"
	"math"
	"strings"
)

// Balance and effect sums of one run in warehouse-scale mode, by plain
// aggregates over the run's own snapshot rows. The balance_history view
// computes the balance for every kept run through a chain of joins and
// unions; read for one run inside the publish transaction it cost most of
// the publish stage (about 30 s at 2 million units on DuckDB) and more
// memory than the rest of the run. Then one query per outcome and
// adjustment for the effects, each joining the snapshot to the weights
// table, cost as much again. RunSumsSQL makes one pass for all of it.

// RunSums describes RunSumsSQL's pass.
type RunSums struct {
	// Covariates of the snapshot, with each categorical one's levels
	// (Levels[i] for covariate i, from BalanceLevelsSQL) and each numeric
	// one's shift (Shifts, numeric covariates in order; the cohort mean).
	Covariates []CovariateMeta
	Levels     [][]string
	Shifts     []float64
	// Matched adds the matched adjustment: Σ set_weight of the unit's
	// rows in the matches table, 0 for an unmatched unit.
	Matched bool
	// Schemes are the weighting schemes, computed from the snapshot's
	// row with Design, Coef and Support exactly as ScoreInto computed the
	// weights table from the cohort query: the snapshot holds the same
	// values (numeric covariates as the same doubles, categorical ones as
	// the level text the design compares), so the weights are the same
	// numbers, without a join of the snapshot to the weights table.
	Schemes []string
	Design  *DesignSQL
	Coef    []float64
	Support Support
	// Outcomes get effect sums under every adjustment but matched (whose
	// SE needs per-set sums: MatchedSumsSQL).
	Outcomes []string
}

// Adjustments is the number of adjustments: unadjusted, matched when
// set, then each scheme.
func (r RunSums) Adjustments() int {
	n := 1 + len(r.Schemes)
	if r.Matched {
		n++
	}
	return n
}

// BalanceWidth is the number of balance columns per adjustment: Σw, Σw²,
// then 2 per numeric covariate and 1 per level.
func (r RunSums) BalanceWidth() int {
	n := 2
	for i, cv := range r.Covariates {
		if cv.Kind == Categorical {
			n += len(r.Levels[i])
		} else {
			n += 2
		}
	}
	return n
}

// EffectWidth is the number of effect columns per outcome and
// adjustment.
const EffectWidth = 8

// RunSumsSQL returns the one aggregate pass of a run's balance and effect
// sums ($1 the run id), one row per arm:
//
//   - t, the treatment;
//   - per adjustment a (unadjusted w = 1, matched when set, each scheme;
//     BalanceWidth columns): Σw_a, Σw_a², then per covariate in order,
//     numeric: Σw_a·δ and Σw_a·δ² with δ = x − K (K its shift),
//     categorical: Σw_a·[x = l] for each of its levels;
//   - per outcome, per adjustment but matched (EffectWidth columns each):
//     over rows with w > 0, the rows with the outcome present, the rows
//     with it missing, Σw, Σw·y, Σw²·y², Σw²·y, Σw² (outcome present), and
//     the count of outcomes other than 0 and 1.
//
// With K near the arm means, Σw·(x − m)² = Σw·δ² − (Σw·δ)²/Σw loses no
// digits worth counting (the shifted one-pass algorithm; Chan, Golub &
// LeVeque 1983), so one pass gives what the view's two passes give. A
// weight of 0 adds nothing to any sum, which is the view's exclusion of
// unmatched and zero-weight units. Every aggregate is a plain sum, so a
// distributed engine computes it as partial sums per node. fence puts an
// OFFSET 0 planner fence under each derived table (Postgres; see
// fenceText), so each per-row value is computed once.
func RunSumsSQL(c *Contract, r RunSums, fence bool) (string, []any, error) {
	if len(r.Levels) != len(r.Covariates) {
		panic(fmt.Sprintf("warehouse: %d level lists for %d covariates", len(r.Levels), len(r.Covariates)))
	}
	b := &ScaleSQL{args: []any{nil}}
	snap := QuoteQualified(c.Schema, c.Cohort.Name)
	// Level 1: the snapshot row's covariate deltas and level indicators,
	// outcomes, and (for the schemes) the linear predictor.
	cols := []string{"c." + Quote(c.Treatment) + " AS t"}
	var bal []string // per-row balance terms, w·term summed
	k := 0
	for i, cv := range r.Covariates {
		if err := ValidIdent(cv.Name); err != nil {
			return "", nil, fmt.Errorf("cohort.covariates: %w", err)
		}
		col := "c." + Quote(cv.Name)
		if cv.Kind == Categorical {
			for j, l := range r.Levels[i] {
				name := fmt.Sprintf("i%d_%d", i+1, j)
				cols = append(cols, fmt.Sprintf("CAST(CASE WHEN CAST(%s AS VARCHAR) = %s THEN 1 ELSE 0 END AS DOUBLE PRECISION) AS %s", col, b.Str(l), name))
				bal = append(bal, name)
			}
			continue
		}
		if k >= len(r.Shifts) {
			panic("warehouse: too few shifts")
		}
		name := fmt.Sprintf("d%d", i+1)
		cols = append(cols, fmt.Sprintf("CAST(%s AS DOUBLE PRECISION) - %s AS %s", col, b.Num(r.Shifts[k]), name))
		k++
		bal = append(bal, name, name+" * "+name)
	}
	for i, o := range r.Outcomes {
		if err := ValidIdent(o); err != nil {
			return "", nil, fmt.Errorf("cohort.outcomes: %w", err)
		}
		cols = append(cols, fmt.Sprintf("CAST(c.%s AS DOUBLE PRECISION) AS y%d", Quote(o), i+1))
	}
	cols = append(cols, "CAST(1 AS DOUBLE PRECISION) AS w0")
	weights := []string{"w0"} // per adjustment, the column of w
	if r.Matched {
		cols = append(cols, "CAST(coalesce(m.w, 0) AS DOUBLE PRECISION) AS wm")
		weights = append(weights, "wm")
	}
	level1 := "SELECT " + strings.Join(cols, ",\n  ")
	var level2 []string
	if len(r.Schemes) > 0 {
		// The snapshot's columns under the design's reading: treatment
		// boolean, categorical levels as text.
		d := *r.Design
		d.Treatment, d.TreatmentBool = c.Treatment, true
		d.Columns = append([]DesignColumn(nil), r.Design.Columns...)
		for j := range d.Columns {
			if d.Columns[j].Categorical {
				d.Columns[j].Text = true
			}
		}
		level1 += ",\n  " + d.TreatmentExpr() + " AS z, " + b.RawEta(&d, r.Coef) + " AS eta"
		lo, hi := "TRUE", "TRUE"
		if !math.IsInf(r.Support.Low, -1) {
			lo = "eta >= " + b.Num(r.Support.Low)
		}
		if !math.IsInf(r.Support.High, 1) {
			hi = "eta <= " + b.Num(r.Support.High)
		}
		level2 = append(level2, Logistic("eta")+" AS e", "("+lo+" AND "+hi+") AS ins")
	}
	level1 += "\nFROM " + snap + " AS c"
	if r.Matched {
		unit := Quote(c.Unit)
		level1 += "\nLEFT JOIN (SELECT " + unit + " AS k, sum(set_weight) AS w FROM " + QuoteQualified(c.Schema, c.Matches.Name) +
			" WHERE run_id = CAST($1 AS VARCHAR) GROUP BY " + unit + ") AS m ON m.k = c." + unit
	}
	level1 += "\nWHERE c.run_id = CAST($1 AS VARCHAR)"
	from := "(" + level1 + "\n" + fenceText(fence) + ") AS l1"
	if len(level2) > 0 {
		from = "(SELECT l1.*, " + strings.Join(level2, ", ") + " FROM " + from + "\n" + fenceText(fence) + ") AS l2"
		var ws []string
		for i, s := range r.Schemes {
			if err := ValidIdent(s); err != nil {
				return "", nil, fmt.Errorf("weighting scheme: %w", err)
			}
			w, err := WeightSQL(s)
			if err != nil {
				return "", nil, err
			}
			ws = append(ws, fmt.Sprintf("%s AS ws%d", w, i+1))
			weights = append(weights, fmt.Sprintf("ws%d", i+1))
		}
		from = "(SELECT l2.*, " + strings.Join(ws, ", ") + " FROM " + from + "\n" + fenceText(fence) + ") AS l3"
	}
	parts := []string{"t"}
	for _, w := range weights {
		parts = append(parts, "sum("+w+")", "sum("+w+" * "+w+")")
		for _, term := range bal {
			parts = append(parts, "sum("+w+" * "+term+")")
		}
	}
	for i := range r.Outcomes {
		y := fmt.Sprintf("y%d", i+1)
		for a, w := range weights {
			if r.Matched && a == 1 {
				continue
			}
			pos := w + " > 0"
			parts = append(parts,
				"CAST(sum(CASE WHEN "+pos+" AND "+y+" IS NOT NULL THEN 1 ELSE 0 END) AS DOUBLE PRECISION)",
				"CAST(sum(CASE WHEN "+pos+" AND "+y+" IS NULL THEN 1 ELSE 0 END) AS DOUBLE PRECISION)",
				"sum(CASE WHEN "+y+" IS NOT NULL THEN "+w+" END)",
				"sum("+w+" * "+y+")", "sum("+w+" * "+w+" * "+y+" * "+y+")", "sum("+w+" * "+w+" * "+y+")",
				"sum(CASE WHEN "+y+" IS NOT NULL THEN "+w+" * "+w+" END)",
				"CAST(sum(CASE WHEN "+pos+" AND "+y+" <> 0 AND "+y+" <> 1 THEN 1 ELSE 0 END) AS DOUBLE PRECISION)")
		}
	}
	return "SELECT " + strings.Join(parts, ",\n  ") + "\nFROM " + from + "\nGROUP BY t", b.args, nil
}

// BalanceLevelsSQL returns the distinct levels of the run's categorical
// covariates in its snapshot ($1 the run id), the view's level set: rows
// of (covariate index in covs, level text). Each branch reads one column
// of the snapshot, no join.
func BalanceLevelsSQL(c *Contract, covs []CovariateMeta) (string, error) {
	var parts []string
	for i, cv := range covs {
		if cv.Kind != Categorical {
			continue
		}
		if err := ValidIdent(cv.Name); err != nil {
			return "", fmt.Errorf("cohort.covariates: %w", err)
		}
		col := "CAST(" + Quote(cv.Name) + " AS VARCHAR)"
		parts = append(parts, fmt.Sprintf("SELECT DISTINCT %d AS i, %s AS level FROM %s WHERE run_id = CAST($1 AS VARCHAR) AND %s IS NOT NULL",
			i, col, QuoteQualified(c.Schema, c.Cohort.Name), Quote(cv.Name)))
	}
	if len(parts) == 0 {
		return "", nil
	}
	return strings.Join(parts, "\nUNION ALL\n"), nil
}
