package study

import (
	"fmt"
	"slices"

	"counterpart/warehouse"
)

// Design width limits. A categorical covariate becomes one model column
// per level, and Newton's method costs k² per unit per pass and k³ per
// step: a 5,000-level column in 20,000 units fitted for minutes and then
// estimated nothing a reader could use (a handful of units per
// coefficient). The limits refuse such a design before anything is built.
const (
	// DefaultMaxLevels is cohort.max_levels' default: levels per
	// categorical covariate.
	DefaultMaxLevels = 100
	// DefaultMaxTerms is score.max_terms' default: model columns,
	// intercept excluded.
	DefaultMaxTerms = 500
	// unitsPerLevel is the fewest units per level, on average, a
	// categorical covariate must have; below minLevelLimit levels it is
	// not applied, so small cohorts keep their few-level covariates.
	unitsPerLevel = 10
	minLevelLimit = 20
)

// RareLevel names the level that cohort.rare_levels pools rare levels
// into: parenthesised, so it does not read as a value of the column.
const RareLevel = "(rare)"

// levelCount is one covariate as the width check sees it.
type levelCount struct {
	name        string
	categorical bool
	levels      int
}

// cohortLevels is the width check's view of a read cohort.
func cohortLevels(c *warehouse.Cohort) []levelCount {
	out := make([]levelCount, len(c.Covariates))
	for k, cov := range c.Covariates {
		out[k] = levelCount{name: cov.Name, categorical: cov.Kind == warehouse.Categorical, levels: len(cov.Levels)}
	}
	return out
}

// describedLevels is the same view of warehouse-scale mode's Describe.
func describedLevels(d *warehouse.Description) []levelCount {
	out := make([]levelCount, len(d.Columns))
	for k, col := range d.Columns {
		out[k] = levelCount{name: col.Name, categorical: col.Kind == warehouse.Categorical, levels: len(col.Levels)}
	}
	return out
}

// levelLimit is the most levels a categorical covariate may have in a
// cohort of n units: cohort.max_levels, and no more than one level per
// unitsPerLevel units (from minLevelLimit levels up).
func levelLimit(s *Spec, n int) int {
	limit := s.Cohort.MaxLevels
	if limit == 0 {
		limit = DefaultMaxLevels
	}
	return min(limit, max(n/unitsPerLevel, minLevelLimit))
}

// checkWidth refuses (bad input, exit 2) a categorical covariate with more
// levels than levelLimit, or a design with more model columns than
// score.max_terms, naming the column, its level count and the fixes.
func checkWidth(s *Spec, covs []levelCount, n int) error {
	limit := levelLimit(s, n)
	terms, widest := 0, -1
	for k, c := range covs {
		if !c.categorical {
			terms++
			continue
		}
		if c.levels > limit {
			return fmt.Errorf("design: %w: categorical covariate %s has %d levels, more than the %d allowed for %d units (cohort.max_levels, default %d, and at most one level per %d units); pool rare levels with cohort.rare_levels: N, group the column in cohort.sql, or drop it",
				warehouse.ErrBadInput, c.name, c.levels, limit, n, DefaultMaxLevels, unitsPerLevel)
		}
		terms += max(c.levels-1, 0)
		if widest < 0 || c.levels > covs[widest].levels {
			widest = k
		}
	}
	maxTerms := s.Score.MaxTerms
	if maxTerms == 0 {
		maxTerms = DefaultMaxTerms
	}
	if terms > maxTerms {
		msg := fmt.Sprintf("the model would have %d columns, more than score.max_terms (%d)", terms, maxTerms)
		if widest >= 0 {
			msg += fmt.Sprintf("; the widest covariate is %s with %d levels", covs[widest].name, covs[widest].levels)
		}
		return fmt.Errorf("design: %w: %s; drop or group covariates in cohort.sql, pool rare levels with cohort.rare_levels: N, or raise score.max_terms", warehouse.ErrBadInput, msg)
	}
	return nil
}

// PooledLevels reports one covariate's rare levels pooled by
// cohort.rare_levels.
type PooledLevels struct {
	Covariate string `json:"covariate"`
	// Level is the level they were pooled into.
	Level string `json:"level"`
	// Levels counts the pooled levels, Units the units they held.
	Levels int `json:"levels"`
	Units  int `json:"units"`
	// MinUnits is cohort.rare_levels: levels with fewer units were pooled.
	MinUnits int `json:"min_units"`
}

// poolRare pools, in every categorical covariate, the levels held by fewer
// than minUnits units into one level, RareLevel, placed last; the other
// levels keep their order, so the reference level stays unless it was
// rare itself. It rewrites the cohort in place: everything after the read
// (design, balance, exact strata, the snapshot, the fingerprint) sees the
// pooled column, so the tables say what the model used.
func poolRare(c *warehouse.Cohort, minUnits int) []PooledLevels {
	if minUnits <= 0 {
		return nil
	}
	var out []PooledLevels
	for k := range c.Covariates {
		cov := &c.Covariates[k]
		if cov.Kind != warehouse.Categorical {
			continue
		}
		counts := make([]int, len(cov.Levels))
		for _, code := range cov.Codes {
			counts[code]++
		}
		remap := make([]int32, len(cov.Levels))
		var levels []string
		rare, units := 0, 0
		for l, n := range counts {
			if n < minUnits {
				rare++
				units += n
				remap[l] = -1
				continue
			}
			remap[l] = int32(len(levels))
			levels = append(levels, cov.Levels[l])
		}
		if rare == 0 {
			continue
		}
		label := RareLevel
		for slices.Contains(levels, label) {
			label += "'"
		}
		pooled := int32(len(levels))
		levels = append(levels, label)
		codes := make([]int32, len(cov.Codes))
		for i, code := range cov.Codes {
			if r := remap[code]; r >= 0 {
				codes[i] = r
			} else {
				codes[i] = pooled
			}
		}
		cov.Levels, cov.Codes = levels, codes
		out = append(out, PooledLevels{Covariate: cov.Name, Level: label, Levels: rare, Units: units, MinUnits: minUnits})
	}
	return out
}
