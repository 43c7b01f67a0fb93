package score

import "fmt"

// DesignCovariate describes one covariate for the model design: numeric,
// or categorical with its levels in the reader's order.
type DesignCovariate struct {
	Name        string
	Categorical bool
	Levels      []string
}

// DesignTerm is one column of the model design: a numeric covariate as
// it is, or the 0/1 indicator of one level of a categorical covariate.
type DesignTerm struct {
	// Name is the coefficient's name: the covariate, or covariate=level.
	Name string
	// Covariate indexes the covariate the term comes from.
	Covariate int
	// Level indexes the level of a categorical term; -1 for a numeric one.
	Level int
}

// Design expands covariates into model terms, the one rule both run
// modes follow (the in-memory expansion and the SQL one of
// warehouse-scale mode): a numeric covariate is one term; a categorical
// covariate is an indicator of every level but the first in the reader's
// order, the reference (dummy coding; common practice). A categorical
// covariate with fewer than two levels cannot enter the model and is
// refused, naming it.
func Design(covs []DesignCovariate) ([]DesignTerm, error) {
	var out []DesignTerm
	for k, c := range covs {
		if !c.Categorical {
			out = append(out, DesignTerm{Name: c.Name, Covariate: k, Level: -1})
			continue
		}
		if len(c.Levels) < 2 {
			lvl := ""
			if len(c.Levels) == 1 {
				lvl = c.Levels[0]
			}
			return nil, fmt.Errorf("covariate %s is constant in the cohort (every unit is %q); remove it from cohort.covariates", c.Name, lvl)
		}
		for l := 1; l < len(c.Levels); l++ {
			out = append(out, DesignTerm{Name: c.Name + "=" + c.Levels[l], Covariate: k, Level: l})
		}
	}
	return out, nil
}
