package study

import (
	"fmt"
	"math"

	"counterpart/match/assign"
	"counterpart/match/score"
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
	// check is the cancellation check (assign.Options.Check).
	check func() error
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
		Order: order, Seed: in.spec.Matching.Seed, Metric: metric, Check: in.check,
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
			if len(cov.Levels) < 2 {
				continue // a constant covariate adds no distance
			}
			terms, err := score.Design([]score.DesignCovariate{{Name: cov.Name, Categorical: true, Levels: cov.Levels}})
			if err != nil {
				return assign.Metric{}, fmt.Errorf("match: %w: %w", warehouse.ErrBadInput, err)
			}
			for _, t := range terms {
				ind := make([]float64, c.N())
				for i, code := range cov.Codes {
					if int(code) == t.Level {
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

// keepPrior returns the prior sets that still hold (assign.KeepPrior),
// after mapping the prior run's unit ids onto this cohort's rows.
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
	bySet := map[int64]int{}
	var sets []assign.PriorSet
	for r := 0; r < p.Len(); r++ {
		var key any
		if c.IDKind == warehouse.IDInt {
			key = p.IntIDs[r]
		} else {
			key = p.TextIDs[r]
		}
		i, ok := index[key]
		k, seen := bySet[p.SetID[r]]
		if !seen {
			k = len(sets)
			bySet[p.SetID[r]] = k
			sets = append(sets, assign.PriorSet{ID: p.SetID[r]})
		}
		sets[k].Members = append(sets[k].Members, assign.PriorMember{Unit: i, Treated: p.Treated[r], Present: ok})
	}
	kept, released, maxID := assign.KeepPrior(sets, in.logit, c.Treated, in.eligible, in.strata, assign.Options{
		Controls: in.spec.Matching.Controls, Reuse: in.spec.Matching.Reuse, Caliper: in.width})
	churn := &Churn{PriorRun: in.prior.runID, PriorSets: len(sets), Kept: len(kept), Released: released}
	if maxID > math.MaxInt32 {
		return nil, nil, 0, fmt.Errorf("keep prior: set ids of run %s are too large", in.prior.runID)
	}
	return kept, churn, int(maxID), nil
}
