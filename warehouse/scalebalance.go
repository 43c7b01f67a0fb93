package warehouse

import (
	"fmt"
	"strings"
)

// Balance of one run in warehouse-scale mode, by plain aggregates over
// the run's own rows. The balance_history view computes the same numbers
// for every kept run through a chain of joins and unions; read for one
// run inside the publish transaction it cost most of the publish stage
// (about 30 s at 2 million units on DuckDB) and more memory than the
// rest of the run. These queries filter on the run id in the scan and
// make three passes: per-arm sums, per-level sums, and the second-pass
// squared deviations (the view's two-pass variance, Austin 2009 formulas
// as in sql/common/balance_view.sql).
//
// The base relation, one row per unit of the run's snapshot:
//
//	t      the treatment
//	w0     1 (unadjusted)
//	w1..   Σ set_weight over the unit's matches rows when matched is
//	       set (0 for an unmatched unit), then each scheme's weight
//	       (0 when absent)
//
// A weight of 0 adds nothing to any sum, which is the view's exclusion
// of unmatched and zero-weight units.
func balanceBase(c *Contract, covs []CovariateMeta, matched bool, schemes []string) (string, int, error) {
	unit := Quote(c.Unit)
	cols := []string{"c." + Quote(c.Treatment) + " AS t", "CAST(1 AS DOUBLE PRECISION) AS w0"}
	for i, cv := range covs {
		if err := ValidIdent(cv.Name); err != nil {
			return "", 0, fmt.Errorf("cohort.covariates: %w", err)
		}
		cols = append(cols, fmt.Sprintf("c.%s AS v%d", Quote(cv.Name), i+1))
	}
	joins := ""
	na := 1
	if matched {
		cols = append(cols, fmt.Sprintf("CAST(coalesce(m.w, 0) AS DOUBLE PRECISION) AS w%d", na))
		joins += "\nLEFT JOIN (SELECT " + unit + " AS k, sum(set_weight) AS w FROM " + QuoteQualified(c.Schema, c.Matches.Name) +
			" WHERE run_id = CAST($1 AS VARCHAR) GROUP BY " + unit + ") AS m ON m.k = c." + unit
		na++
	}
	if len(schemes) > 0 {
		for _, s := range schemes {
			if err := ValidIdent(s); err != nil {
				return "", 0, fmt.Errorf("weighting scheme: %w", err)
			}
			cols = append(cols, fmt.Sprintf("CAST(coalesce(wt.%s, 0) AS DOUBLE PRECISION) AS w%d", Quote(s), na))
			na++
		}
		joins += "\nLEFT JOIN " + QuoteQualified(c.Schema, c.Weights.Name) + " AS wt ON wt.run_id = c.run_id AND wt." + unit + " = c." + unit
	}
	return "SELECT " + strings.Join(cols, ", ") + "\nFROM " + QuoteQualified(c.Schema, c.Cohort.Name) + " AS c" + joins +
		"\nWHERE c.run_id = CAST($1 AS VARCHAR)", na, nil
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

// BalanceSumsSQL returns the one aggregate pass of a run's balance ($1
// the run id): one row per arm with t, then per adjustment a (unadjusted,
// matched when set, each scheme) Σw_a, Σw_a², then per covariate in covs
// order, numeric: Σw_a·δ and Σw_a·δ² with δ = x − K, categorical:
// Σw_a·[x = l] for each of its levels. The shifts K (numeric covariates,
// in order; the cohort mean is the natural choice) and then the levels
// (covariates in order, levels[i] for covariate i) are bound as $2, $3,
// .... With K near the arm means, Σw·(x − m)² = Σw·δ² − (Σw·δ)²/Σw loses
// no digits worth counting (the shifted one-pass algorithm; Chan, Golub &
// LeVeque 1983), so one pass gives what the view's two passes give.
func BalanceSumsSQL(c *Contract, covs []CovariateMeta, matched bool, schemes []string, shifts []float64, levels [][]string) (string, []any, error) {
	if len(levels) != len(covs) {
		panic(fmt.Sprintf("warehouse: %d level lists for %d covariates", len(levels), len(covs)))
	}
	base, na, err := balanceBase(c, covs, matched, schemes)
	if err != nil {
		return "", nil, err
	}
	b := &ScaleSQL{args: []any{nil}}
	var exprs []string // per covariate, the per-row expressions summed with w
	var k int
	for i, cv := range covs {
		if cv.Kind == Categorical {
			for _, l := range levels[i] {
				exprs = append(exprs, fmt.Sprintf("CASE WHEN CAST(v%d AS VARCHAR) = %s THEN w%%[1]d ELSE 0 END", i+1, b.Str(l)))
			}
			continue
		}
		if k >= len(shifts) {
			panic("warehouse: too few shifts")
		}
		d := fmt.Sprintf("(CAST(v%d AS DOUBLE PRECISION) - %s)", i+1, b.Num(shifts[k]))
		k++
		exprs = append(exprs, "w%[1]d * "+d, "w%[1]d * "+d+" * "+d)
	}
	parts := []string{"t"}
	for a := range na {
		parts = append(parts, fmt.Sprintf("sum(w%d)", a), fmt.Sprintf("sum(w%d * w%d)", a, a))
		for _, e := range exprs {
			parts = append(parts, "sum("+fmt.Sprintf(e, a)+")")
		}
	}
	return "SELECT " + strings.Join(parts, ", ") + " FROM (" + base + ") AS b GROUP BY t", b.args, nil
}
