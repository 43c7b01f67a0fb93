package assign

import (
	"math"
	"sort"
)

// PriorSet is one matched set of an earlier run, its members mapped onto
// this run's units.
type PriorSet struct {
	ID      int64
	Members []PriorMember
}

// PriorMember is one member of a prior set: Unit indexes this run's units
// when Present (the member is still in the cohort); Treated is the arm the
// member had in the prior run.
type PriorMember struct {
	Unit    int
	Treated bool
	Present bool
}

// KeepPrior returns the prior sets that still hold, in set-id order, so
// that a nightly rerun keeps yesterday's pairs unless something about them
// changed: every member is still present and eligible (in support) and in
// its prior arm; the set has one treated unit and 1..opt.Controls
// controls; each control lies in the treated unit's exact stratum (strata
// nil: one stratum) and within opt.Caliper of it on this run's score
// (Caliper 0: no limit); without opt.Reuse no control is kept in two sets
// (the earlier set keeps it). Kept sets get this run's distances
// |score_t − score_c|. It also returns how many prior sets were released
// and the largest prior set id (fresh sets are numbered after it).
func KeepPrior(sets []PriorSet, score []float64, treated, eligible []bool, strata []int32, opt Options) (kept []Set, released int, maxID int64) {
	order := make([]int, len(sets))
	for k := range order {
		order[k] = k
	}
	sort.Slice(order, func(a, b int) bool { return sets[order[a]].ID < sets[order[b]].ID })
	if len(sets) > 0 {
		maxID = sets[order[len(order)-1]].ID
	}
	usedControl := map[int]bool{}
	for _, k := range order {
		g := sets[k].Members
		t := -1
		var controls []int
		good := true
		for _, m := range g {
			if !m.Present || !eligible[m.Unit] || treated[m.Unit] != m.Treated {
				good = false
				break
			}
			if m.Treated {
				if t >= 0 {
					good = false // a set with several treated units: not a 1:k set
					break
				}
				t = m.Unit
			} else {
				controls = append(controls, m.Unit)
			}
		}
		if good && (t < 0 || len(controls) == 0 || len(controls) > opt.Controls) {
			good = false
		}
		var dist []float64
		for _, cu := range controls {
			if !good {
				break
			}
			d := math.Abs(score[t] - score[cu])
			if (opt.Caliper > 0 && d > opt.Caliper) || (strata != nil && strata[t] != strata[cu]) ||
				(!opt.Reuse && usedControl[cu]) {
				good = false
			}
			dist = append(dist, d)
		}
		if !good {
			released++
			continue
		}
		for _, cu := range controls {
			usedControl[cu] = true
		}
		kept = append(kept, Set{ID: int(sets[k].ID), Treated: t, Controls: controls, Distances: dist})
	}
	return kept, released, maxID
}
