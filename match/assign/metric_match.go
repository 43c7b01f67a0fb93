package assign

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"sort"
	"time"

	"counterpart/match/assign/flow"
)

// window returns the sorted positions [lo, hi) of the controls in sp whose
// score is inside the caliper of s, |s - score| <= cal. Both predicates
// are monotone along the sorted scores (rounding of a difference is
// monotone), so two binary searches find the contiguous window.
func (p *pool) window(s, cal float64, sp span) (int, int) {
	lo := sp.lo + sort.Search(sp.hi-sp.lo, func(i int) bool { return s-p.score[sp.lo+i] <= cal })
	hi := lo + sort.Search(sp.hi-lo, func(i int) bool { return p.score[lo+i]-s > cal })
	return lo, hi
}

// greedyMetric is Greedy with a Mahalanobis Options.Metric: every treated
// unit, in opt.Order, takes the opt.Controls available controls of its
// stratum inside the propensity caliper that are nearest in the metric,
// ties by lower index. The candidates of a treated unit are the contiguous
// window of controls (sorted by score) inside its caliper; without reuse
// the union-find of the pool skips those already taken.
//
// Cost: O(n p²) for the whitening, then O(w p²) per treated unit for a
// window of w unused controls — which is why a caliper is required.
func greedyMetric(score []float64, treated []bool, stratum []int32, eligible []bool, opt Options) ([]Set, error) {
	var trt []int32
	var keys []controlKey
	for i, s := range score {
		if eligible != nil && !eligible[i] {
			continue
		}
		if math.IsNaN(s) || math.IsInf(s, 0) {
			return nil, fmt.Errorf("greedy matching: unit %d has score %v; exclude it via eligible or fix the score: %w", i, s, ErrScore)
		}
		if treated[i] {
			trt = append(trt, int32(i))
		} else {
			keys = append(keys, controlKey{stratum: stratumOf(stratum, i), unit: int32(i), score: s})
		}
	}
	w, err := newWhitened(opt.Metric, treated, eligible)
	if err != nil {
		return nil, fmt.Errorf("greedy matching: %w", err)
	}
	orderTreated(trt, score, opt)
	p := newPool(keys, !opt.Reuse)
	k := opt.Controls
	var best []candidate // the k nearest so far, ordered by (dist, index)
	sets := make([]Set, 0, len(trt))
	for i, t := range trt {
		if err := checkAt(opt.Check, i); err != nil {
			return nil, err
		}
		sp, ok := p.span(stratumOf(stratum, int(t)))
		if !ok {
			continue
		}
		lo, hi := p.window(score[t], opt.Caliper, sp)
		best = best[:0]
		consider := func(q int) {
			c := candidate{q, w.dist(int(t), int(p.unit[q]))}
			if len(best) == k && !p.before(c, best[k-1]) {
				return
			}
			j := sort.Search(len(best), func(j int) bool { return p.before(c, best[j]) })
			if len(best) < k {
				best = append(best, candidate{})
			}
			copy(best[j+1:], best[j:len(best)-1])
			best[j] = c
		}
		if opt.Reuse {
			for q := lo; q < hi; q++ {
				consider(q)
			}
		} else {
			for q := p.right(lo); q < hi; q = p.right(q + 1) {
				consider(q)
			}
		}
		if len(best) == 0 {
			continue
		}
		set := Set{ID: len(sets) + 1, Treated: int(t), Controls: make([]int, len(best)), Distances: make([]float64, len(best))}
		for j, c := range best {
			set.Controls[j], set.Distances[j] = int(p.unit[c.pos]), c.dist
			if !opt.Reuse {
				p.use(c.pos)
			}
		}
		sets = append(sets, set)
	}
	return sets, nil
}

// optimalMetric is Optimal with a Mahalanobis Options.Metric. The network
// holds every eligible within-caliper pair of each stratum as an arc with
// its metric cost, so the candidate graph is the whole feasible graph: no
// widening rounds are needed, and flow.CheckArcs over the network's arcs
// is already the optimality check over every eligible pair (Certified is
// then complete, Rounds is 1). The objective and the network are
// Optimal's; only the distance differs. The pair count is checked before
// anything is allocated: above Metric.MaxPairs (0 = DefaultMaxPairs) the
// call fails, since memory grows with the pairs.
func optimalMetric(start time.Time, score []float64, treated []bool, stratum []int32, eligible []bool, opt Options) ([]Set, Certificate, error) {
	fail := func(err error) ([]Set, Certificate, error) {
		return nil, Certificate{}, fmt.Errorf("optimal matching: %w", err)
	}
	strata, err := collect("Optimal", score, treated, stratum, eligible)
	if err != nil {
		return fail(err)
	}
	limit := opt.Metric.MaxPairs
	if limit == 0 {
		limit = DefaultMaxPairs
	}
	cal := opt.Caliper
	type win struct{ lo, hi []int32 }
	wins := make([]win, len(strata))
	pairs := 0
	for i, u := range strata {
		wins[i] = win{make([]int32, len(u.ts)), make([]int32, len(u.ts))}
		for t, s := range u.st {
			lo := sort.Search(len(u.sc), func(q int) bool { return s-u.sc[q] <= cal })
			hi := lo + sort.Search(len(u.sc)-lo, func(q int) bool { return u.sc[lo+q]-s > cal })
			wins[i].lo[t], wins[i].hi[t] = int32(lo), int32(hi)
			pairs += hi - lo
		}
	}
	if pairs > limit {
		return fail(fmt.Errorf("%d treated-control pairs lie inside the caliper, more than the limit of %d for %s distance; narrow the caliper, add exact strata or use greedy matching: %w",
			pairs, limit, opt.Metric.Kind, ErrOption))
	}
	w, err := newWhitened(opt.Metric, treated, eligible)
	if err != nil {
		return fail(err)
	}
	k := int64(opt.Controls)
	nets := make([]*flow.Network, len(strata))
	ok := make([]bool, len(strata))
	err = forStrata(len(strata), func(i int) error {
		u := strata[i]
		if len(u.ts) == 0 || len(u.cs) == 0 {
			return nil
		}
		net := flow.New(len(u.ts), len(u.cs), specOneToK(k, len(u.ts)))
		net.Check = opt.Check
		w := w.clone()
		top := 0.0
		for t := range u.ts {
			for q := wins[i].lo[t]; q < wins[i].hi[t]; q++ {
				d := w.dist(int(u.ts[t]), int(u.cs[q]))
				top = math.Max(top, d)
				net.AddArc(t, int(q), d)
			}
		}
		tol := 1e-9 * (1 + top)
		if err := net.Solve(tol); err != nil {
			return fmt.Errorf("stratum with %d treated: %w", len(u.ts), err)
		}
		nets[i], ok[i] = net, net.Balanced() && net.CheckArcs(tol)
		return nil
	})
	if err != nil {
		return fail(err)
	}
	cert := Certificate{Certified: true, Rounds: 1}
	var sets []Set
	for i, net := range nets {
		if net == nil {
			continue
		}
		cert.Certified = cert.Certified && ok[i]
		cert.Edges += net.Arcs()
		u := strata[i]
		type pick struct {
			c int32
			d float64
		}
		per := make([][]pick, len(u.ts))
		for a := 0; a < net.Arcs(); a++ {
			if t, c, d, f := net.Arc(a); f {
				per[t] = append(per[t], pick{int32(c), d})
			}
		}
		for t, cs := range per {
			if len(cs) == 0 {
				continue
			}
			slices.SortFunc(cs, func(a, b pick) int {
				if c := cmp.Compare(a.d, b.d); c != 0 {
					return c
				}
				return cmp.Compare(u.cs[a.c], u.cs[b.c])
			})
			s := Set{Treated: int(u.ts[t]), Controls: make([]int, len(cs)), Distances: make([]float64, len(cs))}
			for j, c := range cs {
				s.Controls[j], s.Distances[j] = int(u.cs[c.c]), c.d
				cert.Objective += c.d
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
