package study

import (
	"counterpart/match/balance"
	"counterpart/warehouse"
)

// balanceFromSums computes this run's balance statistics from the
// publish transaction's sums with balance.FromSums, keyed by adjustment
// (adjs, in RunSums order).
func balanceFromSums(rs *warehouse.Sums, adjs []string) map[string][]balance.Stat {
	var covs []balance.SumsCovariate
	k := 0
	for i, cv := range rs.Spec.Covariates {
		c := balance.SumsCovariate{Name: cv.Name, Categorical: cv.Kind == warehouse.Categorical, Levels: rs.Spec.Levels[i]}
		if !c.Categorical {
			c.Shift = rs.Spec.Shifts[k]
			k++
		}
		covs = append(covs, c)
	}
	arms := make([][2]balance.ArmSums, len(rs.Balance))
	for a, b := range rs.Balance {
		for g := range 2 {
			arms[a][g] = balance.ArmSums(b[g])
		}
	}
	return balance.FromSums(covs, arms, adjs)
}

// balanceShifts returns the shift of each numeric covariate of covs, in
// order, for warehouse.RunSumsSQL: its cohort mean (the design's
// centre), near every arm's mean, which is what the shifted one-pass
// variance needs.
func balanceShifts(d *warehouse.DesignSQL, covs []warehouse.CovariateMeta) []float64 {
	var out []float64
	for _, cv := range covs {
		if cv.Kind == warehouse.Categorical {
			continue
		}
		k := 0.0
		for _, c := range d.Columns {
			if c.Source == cv.Name && !c.Categorical {
				k = c.Center
			}
		}
		out = append(out, k)
	}
	return out
}
