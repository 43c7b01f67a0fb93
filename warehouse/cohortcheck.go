package warehouse

// Shared by the engines' cohort readers, so that "works on DuckDB" and
// "works on Postgres" refuse the same inputs with the same words.

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
)

// FindColumn looks a column up by name: an exact (case-sensitive) match,
// else a unique case-insensitive one.
func FindColumn(names []string, want, role string) (int, error) {
	var exact, folded []int
	for i, n := range names {
		if n == want {
			exact = append(exact, i)
		} else if strings.EqualFold(n, want) {
			folded = append(folded, i)
		}
	}
	switch {
	case len(exact) == 1:
		return exact[0], nil
	case len(exact) > 1:
		return 0, fmt.Errorf("%w: cohort.sql returns %d columns named %s (%s); alias them so each name is unique", ErrBadInput, len(exact), want, role)
	case len(folded) == 1:
		return folded[0], nil
	case len(folded) > 1:
		var got []string
		for _, i := range folded {
			got = append(got, names[i])
		}
		return 0, fmt.Errorf("%w: cohort.sql returns columns %s, which differ from %s (%s) only in case; alias them", ErrBadInput, strings.Join(got, ", "), want, role)
	}
	list := names
	more := ""
	if len(list) > 20 {
		list, more = list[:20], fmt.Sprintf(" … and %d more", len(names)-20)
	}
	return 0, fmt.Errorf("%w: cohort.sql returns no column %s (%s); it returns: %s%s", ErrBadInput, want, role, strings.Join(list, ", "), more)
}

// CanonicalOrder puts the cohort in canonical unit order and reports
// duplicate unit ids: how many rows repeat an id seen before, and one
// such id.
//
// Canonical order (ascending integer id, or bytewise text id) is what
// makes a run independent of the order the engine returned the rows in:
// a parallel or distributed scan returns them in a different order every
// time, and every later stage — the fit's sums, greedy matching's ties,
// set numbering, the written tables — follows the slices' order. One
// sort of an index permutation serves both jobs; cheaper than a map for
// millions of ids.
func CanonicalOrder(c *Cohort) error {
	n := c.N()
	perm := make([]int32, n)
	for i := range perm {
		perm[i] = int32(i)
	}
	var same func(a, b int32) bool
	var show func(i int32) string
	if c.IDKind == IDInt {
		ids := c.IntIDs
		slices.SortFunc(perm, func(a, b int32) int {
			if x := cmp.Compare(ids[a], ids[b]); x != 0 {
				return x
			}
			return cmp.Compare(a, b)
		})
		same = func(a, b int32) bool { return ids[a] == ids[b] }
		show = func(i int32) string { return strconv.FormatInt(ids[i], 10) }
	} else {
		ids := c.TextIDs
		slices.SortFunc(perm, func(a, b int32) int {
			if x := strings.Compare(ids[a], ids[b]); x != 0 {
				return x
			}
			return cmp.Compare(a, b)
		})
		same = func(a, b int32) bool { return ids[a] == ids[b] }
		show = func(i int32) string { return strconv.Quote(ids[i]) }
	}
	dups, example := 0, ""
	for i := 1; i < n; i++ {
		if same(perm[i], perm[i-1]) {
			if dups == 0 {
				example = show(perm[i])
			}
			dups++
		}
	}
	if dups > 0 {
		return fmt.Errorf("%w: unit column %s has %s (for example %s); the cohort must have one row per unit — check the joins in cohort.sql",
			ErrBadInput, c.Unit, Plural(dups, "duplicate value"), example)
	}
	sorted := true
	for i, p := range perm {
		if int(p) != i {
			sorted = false
			break
		}
	}
	if !sorted {
		c.permute(perm)
	}
	return nil
}

// permute reorders every per-unit slice of c so that new row i is old
// row perm[i].
func (c *Cohort) permute(perm []int32) {
	c.IntIDs = permuted(c.IntIDs, perm)
	c.TextIDs = permuted(c.TextIDs, perm)
	c.Treated = permuted(c.Treated, perm)
	for i := range c.Covariates {
		c.Covariates[i].Values = permuted(c.Covariates[i].Values, perm)
		c.Covariates[i].Codes = permuted(c.Covariates[i].Codes, perm)
	}
	for i := range c.Outcomes {
		c.Outcomes[i].Values = permuted(c.Outcomes[i].Values, perm)
	}
}

// permuted returns s reordered by perm (nil stays nil).
func permuted[T any](s []T, perm []int32) []T {
	if s == nil {
		return nil
	}
	out := make([]T, len(s))
	for i, p := range perm {
		out[i] = s[p]
	}
	return out
}

func Plural(n int, what string) string {
	if n == 1 {
		return "1 " + what
	}
	return strconv.Itoa(n) + " " + what + "s"
}

// LevelOrder orders levels ascending: numerically when every level is a
// finite number (ties, such as "1" and "1.0", bytewise), else bytewise,
// which also puts false before true. remap[old code] is the new code.
func LevelOrder(levels []string) (sorted []string, remap []int32) {
	nums := make([]float64, len(levels))
	numeric := true
	for i, l := range levels {
		f, err := strconv.ParseFloat(l, 64)
		if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
			numeric = false
			break
		}
		nums[i] = f
	}
	order := make([]int, len(levels))
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(a, b int) int {
		if numeric && nums[a] != nums[b] {
			if nums[a] < nums[b] {
				return -1
			}
			return 1
		}
		return strings.Compare(levels[a], levels[b])
	})
	sorted = make([]string, len(levels))
	remap = make([]int32, len(levels))
	for newCode, old := range order {
		sorted[newCode] = levels[old]
		remap[old] = int32(newCode)
	}
	return sorted, remap
}

// CheckRoles rejects a query description that names a column for two
// roles or lists a categorical that is not a covariate.
func CheckRoles(q CohortQuery) error {
	if q.Unit == "" || q.Treatment == "" {
		return fmt.Errorf("%w: cohort.unit and cohort.treatment must both name a column", ErrBadInput)
	}
	role := map[string]string{}
	add := func(name, r string) error {
		if name == "" {
			return fmt.Errorf("%w: cohort.%s has an empty column name", ErrBadInput, r)
		}
		if prev, ok := role[strings.ToLower(name)]; ok {
			return fmt.Errorf("%w: column %s is named as %s and as %s; give each column one role", ErrBadInput, name, prev, r)
		}
		role[strings.ToLower(name)] = r
		return nil
	}
	if err := add(q.Unit, "unit"); err != nil {
		return err
	}
	if err := add(q.Treatment, "treatment"); err != nil {
		return err
	}
	for _, c := range q.Covariates {
		if err := add(c, "covariate"); err != nil {
			return err
		}
	}
	for _, o := range q.Outcomes {
		if err := add(o, "outcome"); err != nil {
			return err
		}
	}
	for _, c := range q.Categorical {
		if role[strings.ToLower(c)] != "covariate" {
			return fmt.Errorf("%w: cohort.categorical lists %s, which is not in cohort.covariates", ErrBadInput, c)
		}
	}
	return nil
}
