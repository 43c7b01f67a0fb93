package assign

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"time"

	"counterpart/match/assign/flow"
)

// Optimal performs optimal 1:k matching without reuse on score: it returns
// the sets that minimise, within every exact-match stratum separately, the
// lexicographic objective
//
//  1. the number of treated units left with no control, then
//  2. the number of unfilled control slots, sum over treated of
//     (k - controls received), then
//  3. the total distance, sum over matched pairs of |score_t - score_c|,
//
// with k = opt.Controls, each control used at most once and every pair
// inside the caliper (d <= opt.Caliper, equality inside; 0 = no caliper).
// So every treated unit that can have a control gets one, as many as
// possible get all k, and among those matchings the total distance is
// smallest (Rosenbaum 1989, JASA 84:1024, optimal matching as a
// minimum-cost flow). Treated units with no feasible control get no Set.
//
// The network: each treated node supplies k units; a candidate arc t -> c
// (capacity 1, cost d) for pairs inside the caliper; control c -> hub
// (capacity 1, cost 0); and two bypass arcs t -> hub, one of capacity 1 and
// cost (Tier M, 0) and one of capacity k-1 and cost (Tier 1, 0), with
// M = k*n_t + 1 (n_t treated in the stratum). A treated unit with j >= 1
// controls routes k-j units through the cheap bypass; only an unmatched one
// also uses the expensive arc, and since no matching leaves more than k*n_t
// slots empty, M outweighs any change in item 2 — which makes the Tier,
// computed in exact integers, equal to M*(item 1) + (item 2).
//
// Candidate arcs start as each treated unit's k+2 nearest controls on each
// side in score order, within the caliper; after each solve the final
// potentials are checked against every eligible pair (see Certificate) and
// the windows of treated units with a violating pair are doubled and
// extended to the violating control, until the check passes. opt.Order and
// opt.Seed are ignored; opt.Reuse must be false.
//
// Sets are ordered by the treated unit's input index and numbered from 1;
// each set's controls are nearest first, ties by lower index. Ineligible
// units' scores are never read; an eligible NaN or infinite score is an
// error; slices of different lengths panic. Strata are solved in parallel
// on runtime.GOMAXPROCS(0) goroutines.
//
// Cost: memory O(n + candidate arcs); time per round O(n log n) for the
// check plus one shortest-path search per unit of flow, each touching only
// the nodes closer (in reduced cost) than the free control it ends at.
func Optimal(score []float64, treated []bool, stratum []int32, eligible []bool, opt Options) ([]Set, Certificate, error) {
	start := time.Now()
	if err := opt.validate(); err != nil {
		return nil, Certificate{}, fmt.Errorf("optimal matching: %w", err)
	}
	if opt.Reuse {
		return nil, Certificate{}, fmt.Errorf("optimal matching: option Reuse is not supported (optimal matching uses each control once): %w", ErrOption)
	}
	if opt.Metric.Kind != Logit {
		return optimalMetric(start, score, treated, stratum, eligible, opt)
	}
	strata, err := collect("Optimal", score, treated, stratum, eligible)
	if err != nil {
		return nil, Certificate{}, fmt.Errorf("optimal matching: %w", err)
	}
	k := int64(opt.Controls)
	probs := make([]*problem, len(strata))
	err = forStrata(len(strata), func(i int) error {
		u := strata[i]
		if len(u.ts) == 0 {
			return nil
		}
		p := newProblem(u, opt.Caliper, specOneToK(k, len(u.ts)), opt.Controls+2)
		p.net.Check = opt.Check
		probs[i] = p
		if err := p.solve(); err != nil {
			return fmt.Errorf("stratum with %d treated: %w", len(u.ts), err)
		}
		return nil
	})
	if err != nil {
		return nil, Certificate{}, fmt.Errorf("optimal matching: %w", err)
	}
	cert := Certificate{Certified: true}
	var sets []Set
	for _, p := range probs {
		if p == nil {
			continue
		}
		cert.note(p)
		per := make([][]int32, len(p.u.ts))
		for a := 0; a < p.net.Arcs(); a++ {
			if t, c, _, f := p.net.Arc(a); f {
				per[t] = append(per[t], int32(c))
			}
		}
		for t, cs := range per {
			if len(cs) == 0 {
				continue
			}
			s := Set{Treated: int(p.u.ts[t]), Controls: make([]int, len(cs)), Distances: make([]float64, len(cs))}
			slices.SortFunc(cs, func(a, b int32) int {
				da, db := math.Abs(p.u.st[t]-p.u.sc[a]), math.Abs(p.u.st[t]-p.u.sc[b])
				if c := cmp.Compare(da, db); c != 0 {
					return c
				}
				return cmp.Compare(p.u.cs[a], p.u.cs[b])
			})
			for j, c := range cs {
				s.Controls[j] = int(p.u.cs[c])
				s.Distances[j] = math.Abs(p.u.st[t] - p.u.sc[c])
				cert.Objective += s.Distances[j]
			}
			sets = append(sets, s)
		}
	}
	slices.SortFunc(sets, func(a, b Set) int { return cmp.Compare(a.Treated, b.Treated) })
	for i := range sets {
		sets[i].ID = i + 1
	}
	cert.Seconds = time.Since(start).Seconds()
	return sets, cert, nil
}

// specOneToK is the network of 1:k matching for nt treated units.
func specOneToK(k int64, nt int) flow.Spec {
	m := k*int64(nt) + 1
	return flow.Spec{
		UpT:     [2]flow.Seg{{Cap: 1, Cost: flow.Cost{Tier: m}}, {Cap: int32(k - 1), Cost: flow.Cost{Tier: 1}}},
		UpC:     [2]flow.Seg{{Cap: 1}},
		SupplyT: k,
	}
}

func (c *Certificate) note(p *problem) {
	c.Certified = c.Certified && p.certified
	c.Rounds = max(c.Rounds, p.rounds)
	c.Edges += p.edges
}

// FullOptions configures Full.
type FullOptions struct {
	// Caliper is the largest allowed |score_t - score_c|, equality inside;
	// 0 means none.
	Caliper float64
	// MaxControls bounds the controls in a set with one treated unit
	// (the largest controls-per-treated ratio); 0 means no bound.
	MaxControls int
	// MaxTreated bounds the treated units in a set with one control (so
	// the smallest ratio is 1/MaxTreated); 0 means no bound.
	MaxTreated int
	// Check is as Options.Check.
	Check func() error
}

// Group is one set of a full matching: either one treated unit with one or
// more controls, or one control with two or more treated units.
type Group struct {
	// ID numbers groups from 1 in the order of their lowest member index.
	ID int
	// Treated and Controls hold input indexes in ascending order; at least
	// one of the two has exactly one entry.
	Treated, Controls []int
	// Distances pairs the single unit of one side with each unit of the
	// other side: with one treated unit, Distances[j] = |score_t -
	// score[Controls[j]]|; otherwise Distances[j] = |score[Treated[j]] -
	// score_c|. Its length is max(len(Treated), len(Controls)).
	Distances []float64
}

// Full performs optimal full matching (Rosenbaum 1991, JRSS B 53:597;
// Hansen 2004, JASA 99:609): every eligible unit that can be placed joins
// exactly one group, each group one treated unit with >= 1 controls or one
// control with >= 1 treated units, within exact-match strata, with
//
//	controls per treated <= opt.MaxControls and treated per control <= opt.MaxTreated
//
// and every pair inside opt.Caliper. The objective is lexicographic: first
// the number of eligible units left out of every group (units with no
// partner inside the caliper, or squeezed out by the ratio bounds), then the
// total distance, the sum over groups of the distances in Group.Distances.
//
// Why it is a flow problem: a set of treated-control edges in which every
// unit has degree >= 1 is an edge cover; removing an edge whose two ends
// both have degree >= 2 keeps the cover and does not raise the cost, so a
// minimum-cost cover (after removing such zero-cost edges, which Full does)
// has no such edge — every edge has an end of degree 1, which makes it a
// union of stars, that is, a full matching, and its degree bounds are the
// ratio bounds. The cover is the flow of this network: each treated node
// supplies 1 and each control demands 1; the hub supplies n_c - n_t; arcs
// hub -> t (capacity MaxControls-1, cost 0) and c -> hub (capacity
// MaxTreated-1, cost 0) carry the extra edges of units with degree above 1,
// and t -> hub, hub -> c (capacity 1, cost Tier 1) leave a unit uncovered.
//
// Candidate arcs, certification and parallelism are as for Optimal; each
// control's nearest treated unit on each side is also a candidate so that
// every control starts with a partner.
func Full(score []float64, treated []bool, stratum []int32, eligible []bool, opt FullOptions) ([]Group, Certificate, error) {
	start := time.Now()
	if math.IsNaN(opt.Caliper) || opt.Caliper < 0 {
		return nil, Certificate{}, fmt.Errorf("full matching: option Caliper = %v: need a width >= 0 (0 = no caliper): %w", opt.Caliper, ErrOption)
	}
	if opt.MaxControls < 0 || opt.MaxTreated < 0 {
		return nil, Certificate{}, fmt.Errorf("full matching: options MaxControls = %d, MaxTreated = %d: need >= 0 (0 = no bound): %w", opt.MaxControls, opt.MaxTreated, ErrOption)
	}
	strata, err := collect("Full", score, treated, stratum, eligible)
	if err != nil {
		return nil, Certificate{}, fmt.Errorf("full matching: %w", err)
	}
	probs := make([]*problem, len(strata))
	err = forStrata(len(strata), func(i int) error {
		u := strata[i]
		nt, nc := len(u.ts), len(u.cs)
		if nt == 0 || nc == 0 {
			return nil
		}
		mc, mt := nc, nt
		if opt.MaxControls > 0 {
			mc = min(mc, opt.MaxControls)
		}
		if opt.MaxTreated > 0 {
			mt = min(mt, opt.MaxTreated)
		}
		spec := flow.Spec{
			UpT:     [2]flow.Seg{{Cap: 1, Cost: flow.Cost{Tier: 1}}},
			DownT:   [2]flow.Seg{{Cap: int32(mc - 1)}},
			UpC:     [2]flow.Seg{{Cap: int32(mt - 1)}},
			DownC:   [2]flow.Seg{{Cap: 1, Cost: flow.Cost{Tier: 1}}},
			SupplyT: 1,
			SupplyC: -1,
		}
		p := newProblem(u, opt.Caliper, spec, 2)
		p.net.Check = opt.Check
		p.coverControls()
		probs[i] = p
		if err := p.solve(); err != nil {
			return fmt.Errorf("stratum with %d treated, %d controls: %w", nt, nc, err)
		}
		return nil
	})
	if err != nil {
		return nil, Certificate{}, fmt.Errorf("full matching: %w", err)
	}
	cert := Certificate{Certified: true}
	var groups []Group
	for _, p := range probs {
		if p == nil {
			continue
		}
		cert.note(p)
		groups = append(groups, p.groups(&cert.Objective)...)
	}
	slices.SortFunc(groups, func(a, b Group) int {
		return cmp.Compare(min(a.Treated[0], a.Controls[0]), min(b.Treated[0], b.Controls[0]))
	})
	for i := range groups {
		groups[i].ID = i + 1
	}
	cert.Seconds = time.Since(start).Seconds()
	return groups, cert, nil
}

// groups turns the flow of a full-matching network into stars, dropping
// edges whose two ends both have degree >= 2 (zero-cost at an optimum).
func (p *problem) groups(objective *float64) []Group {
	type edge struct{ t, c int32 }
	var es []edge
	degT := make([]int32, len(p.u.ts))
	degC := make([]int32, len(p.u.cs))
	for a := 0; a < p.net.Arcs(); a++ {
		if t, c, _, f := p.net.Arc(a); f {
			es = append(es, edge{int32(t), int32(c)})
			degT[t]++
			degC[c]++
		}
	}
	kept := es[:0]
	for _, e := range es {
		if degT[e.t] >= 2 && degC[e.c] >= 2 {
			degT[e.t]--
			degC[e.c]--
			continue
		}
		kept = append(kept, e)
	}
	byT := map[int32]*Group{}
	byC := map[int32]*Group{}
	var order []*Group
	for _, e := range kept {
		d := math.Abs(p.u.st[e.t] - p.u.sc[e.c])
		*objective += d
		switch {
		case degT[e.t] >= 2 || degC[e.c] == 1 && degT[e.t] == 1:
			g := byT[e.t]
			if g == nil {
				g = &Group{Treated: []int{int(p.u.ts[e.t])}}
				byT[e.t] = g
				order = append(order, g)
			}
			g.Controls = append(g.Controls, int(p.u.cs[e.c]))
			g.Distances = append(g.Distances, d)
		default:
			g := byC[e.c]
			if g == nil {
				g = &Group{Controls: []int{int(p.u.cs[e.c])}}
				byC[e.c] = g
				order = append(order, g)
			}
			g.Treated = append(g.Treated, int(p.u.ts[e.t]))
			g.Distances = append(g.Distances, d)
		}
	}
	out := make([]Group, len(order))
	for i, g := range order {
		many := g.Controls
		if len(g.Treated) > 1 {
			many = g.Treated
		}
		idx := make([]int, len(many))
		for j := range idx {
			idx[j] = j
		}
		slices.SortFunc(idx, func(a, b int) int { return cmp.Compare(many[a], many[b]) })
		sm, sd := make([]int, len(many)), make([]float64, len(many))
		for j, x := range idx {
			sm[j], sd[j] = many[x], g.Distances[x]
		}
		if len(g.Treated) > 1 {
			g.Treated = sm
		} else {
			g.Controls = sm
		}
		g.Distances = sd
		out[i] = *g
	}
	return out
}
