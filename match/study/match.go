package study

import (
	"fmt"
	"math"
	"sort"

	"counterpart/match/assign"
	"counterpart/warehouse"
)

// Churn reports how a run's matched sets relate to the previous run's when
// matching.keep_prior is on.
type Churn struct {
	PriorRun  string `json:"prior_run"`
	PriorSets int    `json:"prior_sets"`
	Kept      int    `json:"kept_sets"`
	New       int    `json:"new_sets"`
	// Released counts prior sets broken up because a member left the
	// cohort or support, changed arm or stratum, or drifted outside the
	// caliper.
	Released int `json:"released_sets"`
}

// matchInput is what the matching stage needs.
type matchInput struct {
	spec     *Spec
	cohort   *warehouse.Cohort
	logit    []float64
	eligible []bool
	strata   []int32
	width    float64
	prior    *priorRun
	// solver, when set, receives the optimal solver's certificate.
	solver *Solver
}

// Solver reports an optimal or full matching solve: the objective, whether
// it was certified optimal against every eligible pair, and, for optimal
// matching, the greedy total on the same units for comparison.
type Solver struct {
	Objective   Num  `json:"objective"`
	Certified   bool `json:"certified"`
	Rounds      int  `json:"rounds"`
	Edges       int  `json:"candidate_edges"`
	Seconds     Num  `json:"seconds"`
	GreedyTotal Num  `json:"greedy_total,omitempty"`
}

func totalDistance(sets []assign.Set) float64 {
	t := 0.0
	for _, s := range sets {
		for _, d := range s.Distances {
			t += d
		}
	}
	return t
}

// priorRun is the last published run's matched sets, for stable rematching.
type priorRun struct {
	runID string
	sets  warehouse.PriorSets
}

// matchUnits forms the run's matched sets. With a prior run, every prior
// set whose members are all still eligible is kept as it was (same set id)
// and only the units it leaves free are matched anew, so a nightly rerun
// does not reshuffle yesterday's pairs for no reason.
func matchUnits(in matchInput) ([]assign.Set, *Churn, error) {
	z := in.cohort.Treated
	eligible := in.eligible
	var kept []assign.Set
	var churn *Churn
	maxID := 0
	if in.prior != nil {
		var err error
		kept, churn, maxID, err = keepPrior(in)
		if err != nil {
			return nil, nil, err
		}
		eligible = append([]bool(nil), in.eligible...)
		for _, set := range kept {
			eligible[set.Treated] = false
			if !in.spec.Matching.Reuse {
				for _, c := range set.Controls {
					eligible[c] = false
				}
			}
		}
	}
	order, err := assign.ParseOrder(in.spec.Matching.Order)
	if err != nil {
		return nil, nil, err
	}
	metric, err := distanceMetric(in.spec, in.cohort)
	if err != nil {
		return nil, nil, err
	}
	if metric.Kind != assign.Logit && in.width == 0 {
		// The spec demands caliper > 0; a zero pooled SD of the logit
		// (a constant score) still leaves no window.
		return nil, nil, fmt.Errorf("match: %s distance needs a caliper, but the pooled SD of logit(ps) is 0", metric.Kind)
	}
	if metric.Kind != assign.Logit && len(kept) > 0 {
		// Kept sets are re-measured in this run's metric, so the distance
		// column never mixes scales.
		var pairs [][2]int
		for _, set := range kept {
			for _, c := range set.Controls {
				pairs = append(pairs, [2]int{set.Treated, c})
			}
		}
		d, err := metric.Distances(in.logit, z, in.eligible, pairs)
		if err != nil {
			return nil, nil, fmt.Errorf("keep prior: %w", err)
		}
		for k := range kept {
			kept[k].Distances = d[:len(kept[k].Controls):len(kept[k].Controls)]
			d = d[len(kept[k].Controls):]
		}
	}
	opt := assign.Options{
		Controls: in.spec.Matching.Controls, Reuse: in.spec.Matching.Reuse, Caliper: in.width,
		Order: order, Seed: in.spec.Matching.Seed, Metric: metric,
	}
	var fresh []assign.Set
	if in.spec.Matching.Algorithm == "optimal" {
		var cert assign.Certificate
		fresh, cert, err = assign.Optimal(in.logit, z, in.strata, eligible, opt)
		if err == nil && in.solver != nil {
			*in.solver = Solver{Objective: Num(cert.Objective), Certified: cert.Certified, Rounds: cert.Rounds, Edges: cert.Edges, Seconds: Num(cert.Seconds)}
			// Greedy on the same units, for the side-by-side totals.
			if g, gerr := assign.Greedy(in.logit, z, in.strata, eligible, opt); gerr == nil {
				in.solver.GreedyTotal = Num(totalDistance(g))
			}
		}
	} else {
		fresh, err = assign.Greedy(in.logit, z, in.strata, eligible, opt)
	}
	if err != nil {
		return nil, nil, err
	}
	for i := range fresh {
		fresh[i].ID += maxID
	}
	if churn != nil {
		churn.New = len(fresh)
	}
	return append(kept, fresh...), churn, nil
}

// distanceMetric builds the matching distance of the spec from the cohort:
// the zero Metric for logit, else the matching.distance_on covariates
// (default: every numeric covariate), each categorical one as 0/1
// indicators of its non-reference levels (the same coding as the model).
func distanceMetric(s *Spec, c *warehouse.Cohort) (assign.Metric, error) {
	if s.Matching.Distance == "" || s.Matching.Distance == "logit" {
		return assign.Metric{}, nil
	}
	kind, err := assign.ParseMetric(s.Matching.Distance)
	if err != nil {
		return assign.Metric{}, err
	}
	names := s.Matching.DistanceOn
	if len(names) == 0 {
		for _, cov := range c.Covariates {
			if cov.Kind == warehouse.Numeric {
				names = append(names, cov.Name)
			}
		}
	}
	m := assign.Metric{Kind: kind}
	for _, name := range names {
		found := false
		for _, cov := range c.Covariates {
			if cov.Name != name {
				continue
			}
			found = true
			if cov.Kind == warehouse.Numeric {
				m.X = append(m.X, cov.Values)
				continue
			}
			for l := 1; l < len(cov.Levels); l++ {
				ind := make([]float64, c.N())
				for i, code := range cov.Codes {
					if int(code) == l {
						ind[i] = 1
					}
				}
				m.X = append(m.X, ind)
			}
		}
		if !found {
			return assign.Metric{}, fmt.Errorf("match: %w: matching.distance_on names %q, which the cohort does not hold", warehouse.ErrBadInput, name)
		}
	}
	if len(m.X) == 0 {
		return assign.Metric{}, fmt.Errorf("match: %w: the %s distance has no covariate columns (no numeric covariate, or only constant categorical ones); set matching.distance_on", warehouse.ErrBadInput, kind)
	}
	return m, nil
}

// keepPrior returns the prior sets that still hold: every member is in the
// cohort, eligible (in support), in the same arm and exact stratum as its
// set's treated unit, and within the caliper of it on this run's scores.
func keepPrior(in matchInput) ([]assign.Set, *Churn, int, error) {
	c := in.cohort
	p := in.prior.sets
	index := make(map[any]int, c.N())
	if c.IDKind == warehouse.IDInt {
		for i, id := range c.IntIDs {
			index[id] = i
		}
	} else {
		for i, id := range c.TextIDs {
			index[id] = i
		}
	}
	type member struct {
		unit    int
		treated bool
		ok      bool
	}
	groups := map[int64][]member{}
	var ids []int64
	for r := 0; r < p.Len(); r++ {
		var key any
		if c.IDKind == warehouse.IDInt {
			key = p.IntIDs[r]
		} else {
			key = p.TextIDs[r]
		}
		i, ok := index[key]
		if _, seen := groups[p.SetID[r]]; !seen {
			ids = append(ids, p.SetID[r])
		}
		groups[p.SetID[r]] = append(groups[p.SetID[r]], member{unit: i, treated: p.Treated[r], ok: ok})
	}
	sort.Slice(ids, func(a, b int) bool { return ids[a] < ids[b] })
	churn := &Churn{PriorRun: in.prior.runID, PriorSets: len(ids)}
	maxID := 0
	if len(ids) > 0 {
		maxID = int(ids[len(ids)-1])
	}
	usedControl := map[int]bool{}
	var kept []assign.Set
	for _, id := range ids {
		g := groups[id]
		var t = -1
		var controls []int
		good := true
		for _, m := range g {
			if !m.ok || !in.eligible[m.unit] || c.Treated[m.unit] != m.treated {
				good = false
				break
			}
			if m.treated {
				if t >= 0 {
					good = false // a set with several treated units: not a 1:k set
					break
				}
				t = m.unit
			} else {
				controls = append(controls, m.unit)
			}
		}
		if good && (t < 0 || len(controls) == 0 || len(controls) > in.spec.Matching.Controls) {
			good = false
		}
		var dist []float64
		for _, cu := range controls {
			if !good {
				break
			}
			d := math.Abs(in.logit[t] - in.logit[cu])
			if (in.width > 0 && d > in.width) || (in.strata != nil && in.strata[t] != in.strata[cu]) ||
				(!in.spec.Matching.Reuse && usedControl[cu]) {
				good = false
			}
			dist = append(dist, d)
		}
		if !good {
			churn.Released++
			continue
		}
		for _, cu := range controls {
			usedControl[cu] = true
		}
		kept = append(kept, assign.Set{ID: int(id), Treated: t, Controls: controls, Distances: dist})
	}
	churn.Kept = len(kept)
	if maxID > math.MaxInt32 {
		return nil, nil, 0, fmt.Errorf("keep prior: set ids of run %s are too large", in.prior.runID)
	}
	return kept, churn, maxID, nil
}
