package study

import (
	"fmt"
	"testing"

	"counterpart/warehouse"
)

// TestPoolRare checks the pooling rule: levels under the minimum go to
// one level placed last, the others keep their order (and the reference
// its place unless it was rare), codes follow, and a real level already
// named "(rare)" is not merged with the pool.
func TestPoolRare(t *testing.T) {
	for _, tc := range []struct {
		name       string
		levels     []string
		codes      []int32
		min        int
		wantLevels string
		wantCodes  string
		wantReport string
	}{
		{"none rare", []string{"a", "b"}, []int32{0, 1, 0, 1}, 2, "[a b]", "[0 1 0 1]", "[]"},
		{"off", []string{"a", "b"}, []int32{0, 1, 0}, 0, "[a b]", "[0 1 0]", "[]"},
		{"two pooled", []string{"a", "b", "c", "d"}, []int32{0, 0, 1, 2, 3, 3}, 2, "[a d (rare)]", "[0 0 2 2 1 1]", "[{x (rare) 2 2 2}]"},
		{"reference rare", []string{"a", "b"}, []int32{0, 1, 1}, 2, "[b (rare)]", "[1 0 0]", "[{x (rare) 1 1 2}]"},
		{"name taken", []string{"(rare)", "b"}, []int32{0, 0, 1}, 2, "[(rare) (rare)']", "[0 0 1]", "[{x (rare)' 1 1 2}]"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c := &warehouse.Cohort{Covariates: []warehouse.Covariate{
				{Name: "n", Kind: warehouse.Numeric, Values: make([]float64, len(tc.codes))},
				{Name: "x", Kind: warehouse.Categorical, Levels: tc.levels, Codes: tc.codes},
			}}
			rep := poolRare(c, tc.min)
			cov := c.Covariates[1]
			var r []string
			for _, p := range rep {
				r = append(r, fmt.Sprintf("{%s %s %d %d %d}", p.Covariate, p.Level, p.Levels, p.Units, p.MinUnits))
			}
			if got := fmt.Sprint(cov.Levels); got != tc.wantLevels {
				t.Errorf("levels %s, want %s", got, tc.wantLevels)
			}
			if got := fmt.Sprint(cov.Codes); got != tc.wantCodes {
				t.Errorf("codes %s, want %s", got, tc.wantCodes)
			}
			if got := fmt.Sprint(r); got != tc.wantReport {
				t.Errorf("report %s, want %s", got, tc.wantReport)
			}
		})
	}
}

// TestCheckWidth checks the level limit (cohort.max_levels, one level per
// ten units from twenty levels up) and the term limit at their edges.
func TestCheckWidth(t *testing.T) {
	cat := func(l int) levelCount { return levelCount{name: "g", categorical: true, levels: l} }
	num := levelCount{name: "x"}
	for _, tc := range []struct {
		name      string
		maxLevels int
		maxTerms  int
		covs      []levelCount
		n         int
		ok        bool
	}{
		{"default limit", 0, 0, []levelCount{cat(100)}, 20000, true},
		{"past default", 0, 0, []levelCount{cat(101)}, 20000, false},
		{"raised", 300, 0, []levelCount{cat(300)}, 20000, true},
		{"per-unit rule", 300, 0, []levelCount{cat(201)}, 2000, false},
		{"small cohort keeps 20", 0, 0, []levelCount{cat(20)}, 50, true},
		{"small cohort past 20", 0, 0, []levelCount{cat(21)}, 50, false},
		{"terms at limit", 0, 3, []levelCount{num, cat(3)}, 1000, true},
		{"terms past limit", 0, 3, []levelCount{num, num, cat(3)}, 1000, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			s := &Spec{Cohort: CohortSpec{MaxLevels: tc.maxLevels}, Score: ScoreSpec{MaxTerms: tc.maxTerms}}
			err := checkWidth(s, tc.covs, tc.n)
			if (err == nil) != tc.ok {
				t.Fatalf("checkWidth: %v, want ok=%v", err, tc.ok)
			}
		})
	}
}
