package warehouse

import (
	"errors"
	"fmt"
	"strings"
)

// CheckPublication catches a publication that does not fit its output
// description before an engine writes anything: a final status that is
// not final, columns of the wrong length, codes without a level, match
// rows naming no unit. These are programming errors of the caller, not
// bad input, so the error does not wrap ErrBadInput. (The same checks as
// the DuckDB engine's, shared so that engines agree.)
func CheckPublication(out Output, p *Publication) error {
	switch p.Run.Status {
	case StatusSucceeded, StatusRejected, StatusFailed, StatusSkipped:
	default:
		return fmt.Errorf("run %s: final status %q is not one of succeeded, rejected, failed, skipped", p.Run.RunID, p.Run.Status)
	}
	c := p.Cohort
	if c == nil {
		if len(p.PS)+len(p.LogitPS)+len(p.InSupport)+p.Matches.Len()+len(p.Weights) > 0 {
			return errors.New("rows given without their cohort")
		}
		return nil
	}
	n := c.N()
	if c.IDKind != out.IDKind || c.Unit != out.Unit || c.Treatment != out.Treatment {
		return fmt.Errorf("cohort unit %s/treatment %s differ from the output's %s/%s", c.Unit, c.Treatment, out.Unit, out.Treatment)
	}
	if (c.IDKind == IDInt && len(c.IntIDs) != n) || (c.IDKind == IDText && len(c.TextIDs) != n) {
		return fmt.Errorf("cohort has %d ids for %d units", max(len(c.IntIDs), len(c.TextIDs)), n)
	}
	covs := map[string]*Covariate{}
	for i := range c.Covariates {
		covs[c.Covariates[i].Name] = &c.Covariates[i]
	}
	for _, m := range out.Covariates {
		cv, ok := covs[m.Name]
		switch {
		case !ok:
			return fmt.Errorf("covariate %s is not in the cohort", m.Name)
		case cv.Kind != m.Kind:
			return fmt.Errorf("covariate %s: kind differs between cohort and output", m.Name)
		case m.Kind == Numeric && len(cv.Values) != n, m.Kind == Categorical && len(cv.Codes) != n:
			return fmt.Errorf("covariate %s has the wrong number of values for %d units", m.Name, n)
		}
		if m.Kind == Categorical {
			for _, code := range cv.Codes {
				if code < 0 || int(code) >= len(cv.Levels) {
					return fmt.Errorf("covariate %s: code %d has no level", m.Name, code)
				}
			}
		}
	}
	outcomes := map[string]int{}
	for _, oc := range c.Outcomes {
		outcomes[oc.Name] = len(oc.Values)
	}
	for _, name := range out.Outcomes {
		if k, ok := outcomes[name]; !ok || k != n {
			return fmt.Errorf("outcome %s: %d values for %d units", name, k, n)
		}
	}
	for _, s := range []struct {
		what string
		k    int
	}{{"ps", len(p.PS)}, {"logit_ps", len(p.LogitPS)}, {"in_support", len(p.InSupport)}} {
		if s.k != n {
			return fmt.Errorf("scores: %s has %d values for %d units", s.what, s.k, n)
		}
	}
	m := p.Matches
	k := m.Len()
	if len(m.Unit) != k || len(m.Treated) != k || len(m.SetWeight) != k || len(m.Distance) != k {
		return fmt.Errorf("matches: columns of unequal length")
	}
	for i, u := range m.Unit {
		if u < 0 || u >= n {
			return fmt.Errorf("matches: row %d names unit index %d of %d", i, u, n)
		}
	}
	if len(p.Weights) != len(out.Schemes) {
		return fmt.Errorf("weights: %d columns for %d schemes", len(p.Weights), len(out.Schemes))
	}
	for i, wc := range p.Weights {
		if len(wc) != n {
			return fmt.Errorf("weights: scheme %s has %d values for %d units", out.Schemes[i], len(wc), n)
		}
	}
	return nil
}

// CheckScalePublication checks a warehouse-scale publication: the engine
// writes only its matches (and effects) from memory, so only the unit ids
// the match rows point at are needed.
func CheckScalePublication(out Output, p *Publication) error {
	if len(p.PS)+len(p.LogitPS)+len(p.InSupport)+len(p.Weights) > 0 {
		return errors.New("a warehouse-scale publication writes scores and weights inside the engine; PS, LogitPS, InSupport and Weights must be empty")
	}
	m := p.Matches
	if m.Len() == 0 {
		return nil
	}
	c := p.Cohort
	if c == nil {
		return errors.New("match rows given without the unit ids they point at")
	}
	n := len(c.IntIDs)
	if c.IDKind == IDText {
		n = len(c.TextIDs)
	}
	if c.IDKind != out.IDKind || c.Unit != out.Unit {
		return fmt.Errorf("cohort unit %s differs from the output's %s", c.Unit, out.Unit)
	}
	k := m.Len()
	if len(m.Unit) != k || len(m.Treated) != k || len(m.SetWeight) != k || len(m.Distance) != k {
		return fmt.Errorf("matches: columns of unequal length")
	}
	for i, u := range m.Unit {
		if u < 0 || u >= n {
			return fmt.Errorf("matches: row %d names unit index %d of %d", i, u, n)
		}
	}
	return nil
}

// Placeholders returns "$1, $2, …, $n": the bound-parameter list of an IN
// clause over n values (retention's run ids). Both engines number their
// parameters this way.
func Placeholders(n int) string {
	var b strings.Builder
	for i := 1; i <= n; i++ {
		if i > 1 {
			b.WriteString(", ")
		}
		fmt.Fprintf(&b, "$%d", i)
	}
	return b.String()
}
