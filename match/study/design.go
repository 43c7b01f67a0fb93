package study

import (
	"cmp"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"counterpart/match/balance"
	"counterpart/match/score"
	"counterpart/warehouse"
)

// design is the cohort turned into the plain values the stages take.
type design struct {
	// model columns: numeric covariates as they are, categorical
	// covariates as 0/1 indicators of every level but the reference.
	x     [][]float64
	names []string
	// vars are the balance variables: each numeric covariate and every
	// level of each categorical covariate (the reference level included,
	// because readers look for it).
	vars []balance.Variable
}

// buildDesign expands covariates by score.Design's rule. It shares the
// cohort's numeric columns rather than copying them: at ten million units
// a copy is real memory.
func buildDesign(c *warehouse.Cohort) (*design, error) {
	d := &design{}
	n := c.N()
	covs := make([]score.DesignCovariate, len(c.Covariates))
	for k, cov := range c.Covariates {
		covs[k] = score.DesignCovariate{Name: cov.Name, Categorical: cov.Kind == warehouse.Categorical, Levels: cov.Levels}
	}
	terms, err := score.Design(covs)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", warehouse.ErrBadInput, err)
	}
	// Balance reads every level of a categorical covariate, the reference
	// included, because readers look for it.
	ind := make([][][]float64, len(c.Covariates))
	for k, cov := range c.Covariates {
		switch cov.Kind {
		case warehouse.Numeric:
			d.vars = append(d.vars, balance.Variable{Name: cov.Name, Values: cov.Values})
		case warehouse.Categorical:
			ind[k] = make([][]float64, len(cov.Levels))
			for l := range ind[k] {
				ind[k][l] = make([]float64, n)
			}
			for i, code := range cov.Codes {
				ind[k][code][i] = 1
			}
			for l, lvl := range cov.Levels {
				d.vars = append(d.vars, balance.Variable{Name: cov.Name, Level: lvl, Binary: true, Values: ind[k][l]})
			}
		}
	}
	for _, t := range terms {
		col := c.Covariates[t.Covariate].Values
		if t.Level >= 0 {
			col = ind[t.Covariate][t.Level]
		}
		d.x = append(d.x, col)
		d.names = append(d.names, t.Name)
	}
	return d, nil
}

// strata numbers the distinct combinations of the exact_on covariates so
// matching stays inside them; nil when there are none.
func strata(c *warehouse.Cohort, exactOn []string) ([]int32, int) {
	if len(exactOn) == 0 {
		return nil, 1
	}
	var cols []*warehouse.Covariate
	for _, name := range exactOn {
		for i := range c.Covariates {
			if c.Covariates[i].Name == name {
				cols = append(cols, &c.Covariates[i])
			}
		}
	}
	ids := map[string]int32{}
	out := make([]int32, c.N())
	key := make([]byte, 0, 8*len(cols))
	for i := range out {
		key = key[:0]
		for _, col := range cols {
			if col.Kind == warehouse.Categorical {
				key = binary.LittleEndian.AppendUint64(key, uint64(col.Codes[i]))
			} else {
				key = binary.LittleEndian.AppendUint64(key, math.Float64bits(col.Values[i]))
			}
		}
		id, ok := ids[string(key)]
		if !ok {
			id = int32(len(ids))
			ids[string(key)] = id
		}
		out[i] = id
	}
	return out, len(ids)
}

// fingerprint hashes the cohort rows in unit-id order, so a rerun can tell
// whether the cohort changed whatever order the query returned rows in.
func fingerprint(c *warehouse.Cohort) string {
	n := c.N()
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	// Cohort queries usually return rows in id order; sort only if not.
	if c.IDKind == warehouse.IDInt {
		if !slices.IsSorted(c.IntIDs) {
			slices.SortFunc(idx, func(a, b int) int { return cmp.Compare(c.IntIDs[a], c.IntIDs[b]) })
		}
	} else if !slices.IsSorted(c.TextIDs) {
		slices.SortFunc(idx, func(a, b int) int { return strings.Compare(c.TextIDs[a], c.TextIDs[b]) })
	}
	h := sha256.New()
	buf := make([]byte, 0, 256)
	put := func(f float64) { buf = binary.LittleEndian.AppendUint64(buf, math.Float64bits(f)) }
	for _, i := range idx {
		buf = buf[:0]
		if c.IDKind == warehouse.IDInt {
			buf = binary.LittleEndian.AppendUint64(buf, uint64(c.IntIDs[i]))
		} else {
			buf = append(buf, c.TextIDs[i]...)
			buf = append(buf, 0)
		}
		if c.Treated[i] {
			buf = append(buf, 1)
		} else {
			buf = append(buf, 0)
		}
		for _, cov := range c.Covariates {
			if cov.Kind == warehouse.Categorical {
				buf = append(buf, cov.Levels[cov.Codes[i]]...)
				buf = append(buf, 0)
			} else {
				put(cov.Values[i])
			}
		}
		for _, o := range c.Outcomes {
			put(o.Values[i])
		}
		h.Write(buf)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// pooledSD is √((s₁² + s₀²)/2) with n−1 sample variances: the SD the
// caliper is measured in (Austin 2011, Pharm Stat 10:150, pooled reading).
func pooledSD(x []float64, z []bool) float64 {
	return balance.PooledSD(balance.Variable{Values: x}, z)
}

// checkTextNumbers refuses a text covariate whose values are numbers (all
// or most of them): it is almost always a numeric column that picked up a
// stray marker like "n/a", and treating it as categories would silently
// change the model. The analyst casts it in SQL or declares it categorical.
func checkTextNumbers(s *Spec, c *warehouse.Cohort, sum *Summary) error {
	declared := map[string]bool{}
	for _, name := range s.Cohort.Categorical {
		declared[name] = true
	}
	pooled := map[string]string{}
	for _, p := range sum.Pooled {
		pooled[p.Covariate] = p.Level
	}
	for _, cov := range c.Covariates {
		if cov.Kind != warehouse.Categorical || declared[cov.Name] {
			continue
		}
		numeric, other := 0, ""
		for _, l := range cov.Levels {
			if lvl, ok := pooled[cov.Name]; ok && l == lvl {
				continue // the pool is ours, not the column's
			}
			if _, err := strconv.ParseFloat(strings.TrimSpace(l), 64); err == nil {
				numeric++
			} else if other == "" {
				other = l
			}
		}
		if numeric < 2 || float64(numeric) < 0.8*float64(len(cov.Levels)) {
			continue
		}
		if other != "" {
			return fmt.Errorf("read cohort: %w: covariate %s is text holding numbers and %q; cast it to a number in cohort.sql (with the odd values as NULL handled there)", warehouse.ErrBadInput, cov.Name, other)
		}
		return fmt.Errorf("read cohort: %w: covariate %s is text holding numbers; cast it to a number in cohort.sql, or list it under cohort.categorical to use its values as categories", warehouse.ErrBadInput, cov.Name)
	}
	return nil
}
