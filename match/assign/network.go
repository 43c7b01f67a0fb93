package assign

import (
	"cmp"
	"fmt"
	"math"
	"runtime"
	"slices"
	"sort"
	"sync"

	"counterpart/match/assign/flow"
)

// Certificate reports how an optimal or full matching was solved and
// whether its optimality was proved over all eligible pairs.
type Certificate struct {
	// Objective is the total |score_t - score_c| over all matched pairs,
	// summed over strata. It excludes the penalties for unmatched units,
	// which are minimised first (see Optimal and Full).
	Objective float64
	// Certified is true when, in every stratum, the final node potentials
	// give every residual arc of the full network — every eligible pair
	// inside the caliper, not only the candidate arcs — a reduced cost of
	// at least -tol, tol = 1e-9 * (1 + score range of the stratum). That is
	// the linear-programming optimality condition of min-cost flow (Ahuja,
	// Magnanti & Orlin 1993, Theorem 9.3), up to tol per arc.
	Certified bool
	// Rounds is the largest number of solve-and-check rounds any stratum
	// needed (1 when the first candidate graph was already optimal).
	Rounds int
	// Edges is the number of candidate arcs in the final networks.
	Edges int
	// Seconds is the wall-clock time of the call.
	Seconds float64
}

// maxRounds bounds the widen-and-resolve loop. Each failed check at least
// doubles the candidate window of a violating treated unit, so a unit's
// window covers its whole caliper range after about log2(n) of its own
// failures; the bound only guards against pathological inputs, and a
// result that reaches it is returned with Certified = false.
const maxRounds = 64

// stratumUnits holds the eligible units of one stratum, each side sorted by
// (score, input index).
type stratumUnits struct {
	ts, cs []int32
	st, sc []float64
}

// collect validates the inputs shared by Optimal and Full and splits the
// eligible units into strata, in ascending stratum value.
func collect(step string, score []float64, treated []bool, stratum []int32, eligible []bool) ([]stratumUnits, error) {
	n := len(score)
	if len(treated) != n {
		panic(fmt.Sprintf("assign.%s: len(treated) = %d, len(score) = %d", step, len(treated), n))
	}
	if stratum != nil && len(stratum) != n {
		panic(fmt.Sprintf("assign.%s: len(stratum) = %d, len(score) = %d", step, len(stratum), n))
	}
	if eligible != nil && len(eligible) != n {
		panic(fmt.Sprintf("assign.%s: len(eligible) = %d, len(score) = %d", step, len(eligible), n))
	}
	if n > math.MaxInt32-2 {
		panic(fmt.Sprintf("assign.%s: %d units exceed the int32 index limit", step, n))
	}
	idx := map[int32]int{}
	var out []stratumUnits
	var keys []int32
	for i, s := range score {
		if eligible != nil && !eligible[i] {
			continue
		}
		if math.IsNaN(s) || math.IsInf(s, 0) {
			return nil, fmt.Errorf("unit %d has score %v; exclude it via eligible or fix the score: %w", i, s, ErrScore)
		}
		k := stratumOf(stratum, i)
		j, ok := idx[k]
		if !ok {
			j = len(out)
			idx[k] = j
			out = append(out, stratumUnits{})
			keys = append(keys, k)
		}
		if treated[i] {
			out[j].ts = append(out[j].ts, int32(i))
		} else {
			out[j].cs = append(out[j].cs, int32(i))
		}
	}
	order := make([]int, len(out))
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(a, b int) int { return cmp.Compare(keys[a], keys[b]) })
	sorted := make([]stratumUnits, 0, len(out))
	for _, j := range order {
		u := out[j]
		bySc := func(a, b int32) int {
			if c := cmp.Compare(score[a], score[b]); c != 0 {
				return c
			}
			return cmp.Compare(a, b)
		}
		slices.SortFunc(u.ts, bySc)
		slices.SortFunc(u.cs, bySc)
		u.st = make([]float64, len(u.ts))
		u.sc = make([]float64, len(u.cs))
		for i, t := range u.ts {
			u.st[i] = score[t]
		}
		for i, c := range u.cs {
			u.sc[i] = score[c]
		}
		sorted = append(sorted, u)
	}
	return sorted, nil
}

// problem is the candidate network of one stratum together with the
// candidate window of every treated unit: the controls at sorted positions
// [l[t], r[t]), always inside t's caliper range [lo[t], hi[t]).
type problem struct {
	u         stratumUnits
	cal       float64 // 0 = none
	tol       float64
	net       *flow.Network
	pos       []int32 // first control position with score >= treated score
	lo, hi    []int32
	l, r      []int32
	extra     [][]int32 // arcs added outside the window, per treated
	w0        int
	edges     int
	rounds    int
	certified bool
}

func (p *problem) inside(d float64) bool { return p.cal == 0 || d <= p.cal }

func newProblem(u stratumUnits, cal float64, spec flow.Spec, w0 int) *problem {
	nt, nc := len(u.ts), len(u.cs)
	p := &problem{u: u, cal: cal, w0: w0,
		net: flow.New(nt, nc, spec),
		pos: make([]int32, nt), lo: make([]int32, nt), hi: make([]int32, nt),
		l: make([]int32, nt), r: make([]int32, nt), extra: make([][]int32, nt)}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range [][]float64{u.st, u.sc} {
		if len(s) > 0 {
			lo, hi = math.Min(lo, s[0]), math.Max(hi, s[len(s)-1])
		}
	}
	p.tol = 1e-9
	if hi > lo {
		p.tol = 1e-9 * (1 + (hi - lo))
	}
	for t, s := range u.st {
		x := sort.SearchFloat64s(u.sc, s)
		p.pos[t] = int32(x)
		p.lo[t] = int32(sort.Search(x, func(q int) bool { return p.inside(s - u.sc[q]) }))
		p.hi[t] = int32(x + sort.Search(nc-x, func(i int) bool { return !p.inside(u.sc[x+i] - s) }))
		p.l[t], p.r[t] = int32(x), int32(x)
		p.widen(t, int32(max(int(p.lo[t]), x-w0)), int32(min(int(p.hi[t]), x+w0)))
		// The control of the same rank quantile: in one dimension without a
		// caliper, matching the i-th treated to the i-th control is optimal
		// when the groups are equal in size, and no nearest-neighbour window
		// holds those long arcs when the groups' scores are shifted.
		j := int32(int64(t) * int64(nc) / int64(max(nt, 1)))
		for q := j - 1; q <= j+1; q++ {
			if q >= p.lo[t] && q < p.hi[t] && (q < p.l[t] || q >= p.r[t]) {
				p.net.AddArc(t, int(q), math.Abs(s-u.sc[q]))
				p.extra[t] = append(p.extra[t], q)
			}
		}
	}
	return p
}

// widen grows t's window to [nl, nr) (clipped to the caliper range) and
// adds the arcs for the newly covered positions.
func (p *problem) widen(t int, nl, nr int32) {
	nl, nr = max(nl, p.lo[t]), min(nr, p.hi[t])
	s := p.u.st[t]
	add := func(q int32) {
		if !slices.Contains(p.extra[t], q) {
			p.net.AddArc(t, int(q), math.Abs(s-p.u.sc[q]))
		}
	}
	for q := nl; q < p.l[t]; q++ {
		add(q)
	}
	for q := p.r[t]; q < nr; q++ {
		add(q)
	}
	p.l[t], p.r[t] = min(nl, p.l[t]), max(nr, p.r[t])
}

// coverControls extends treated windows so that every control has an arc
// to its nearest treated unit on each side (when inside the caliper); full
// matching needs this because every control must join a set.
func (p *problem) coverControls() {
	st, sc := p.u.st, p.u.sc
	for q, s := range sc {
		j := sort.SearchFloat64s(st, s) // first treated with score >= s
		for _, t := range []int{j - 1, j} {
			if t < 0 || t >= len(st) || !p.inside(math.Abs(st[t]-s)) {
				continue
			}
			if int32(q) < p.l[t] {
				p.widen(t, int32(q), p.r[t])
			} else if int32(q) >= p.r[t] {
				p.widen(t, p.l[t], int32(q+1))
			}
		}
	}
}

// solve runs the solve / certify / widen loop.
func (p *problem) solve() error {
	for p.rounds = 1; ; p.rounds++ {
		if p.rounds > 1 {
			p.net.Reset()
		}
		if err := p.net.Solve(p.tol); err != nil {
			return err
		}
		viol := p.violations()
		if len(viol) == 0 {
			p.certified = p.net.Balanced() && p.net.CheckArcs(p.tol)
			break
		}
		if p.rounds == maxRounds {
			break
		}
		for _, v := range viol {
			t := int(v.t)
			if v.q < p.l[t] || v.q >= p.r[t] {
				p.net.AddArc(t, int(v.q), math.Abs(p.u.st[t]-p.u.sc[v.q]))
				p.extra[t] = append(p.extra[t], v.q)
			}
			// Double the window on the violating side.
			if v.q < p.pos[t] {
				p.widen(t, p.pos[t]-2*max(p.pos[t]-p.l[t], 1), p.r[t])
			} else {
				p.widen(t, p.l[t], p.pos[t]+2*max(p.r[t]-p.pos[t], 1))
			}
		}
	}
	p.edges = p.net.Arcs()
	return nil
}

type violation struct{ t, q int32 }

// violations checks the reduced cost of every eligible pair (t, c) inside
// the caliper that carries no flow, which is all the optimality condition
// asks of arcs outside the candidate network (they carry no flow).
//
// For c left of t (s_c < s_t) the condition d + h_t - h_c >= 0 with
// d = s_t - s_c reads (h_c + s_c) - s_t <= h_t, and for c right of t
// (s_c >= s_t) it reads (h_c - s_c) + s_t <= h_t. So one range-maximum
// query of h_c + s_c over t's left caliper range, and one of h_c - s_c over
// the right range, settle all pairs of t at once. Pairs that carry flow
// must be excluded (their forward arc is not residual, and flow.CheckArcs
// checks their reverse arc), so each range is split at the positions of
// t's matched controls: a treated unit with m matched controls costs
// O((m+1) log n_c). The whole check is O((n + flow) log n) time and O(n)
// memory, with a tree over the controls sorted by score. Potentials are
// (Tier, Dist) pairs; the maxima are lexicographic, which is valid because
// adding the same s_t to every Dist keeps the order.
func (p *problem) violations() []violation {
	nc := len(p.u.cs)
	left, right := newMaxTree(nc), newMaxTree(nc)
	for q, s := range p.u.sc {
		h := p.net.PotentialC(q)
		left.set(q, flow.Cost{Tier: h.Tier, Dist: h.Dist + s})
		right.set(q, flow.Cost{Tier: h.Tier, Dist: h.Dist - s})
	}
	used := make([][]int32, len(p.u.ts))
	for a := 0; a < p.net.Arcs(); a++ {
		if t, c, _, f := p.net.Arc(a); f {
			used[t] = append(used[t], int32(c))
		}
	}
	var out []violation
	for t, s := range p.u.st {
		ht := p.net.PotentialT(t)
		ex := used[t]
		slices.Sort(ex)
		var worst flow.Cost
		var wq int32
		scan := func(tree *maxTree, a, b int32, shift float64) {
			worst, wq = flow.Cost{Tier: math.MinInt64}, -1
			for _, x := range append(ex, b) {
				hiEnd := min(x, b)
				if hiEnd > a {
					k, q := tree.query(int(a), int(hiEnd))
					k.Dist += shift
					if worst.Less(k) {
						worst, wq = k, int32(q)
					}
				}
				a = max(a, x+1)
				if a >= b {
					break
				}
			}
			if wq >= 0 && (worst.Tier > ht.Tier || (worst.Tier == ht.Tier && worst.Dist > ht.Dist+p.tol)) {
				out = append(out, violation{int32(t), wq})
			}
		}
		scan(&left, p.lo[t], p.pos[t], -s)
		scan(&right, p.pos[t], p.hi[t], s)
	}
	return out
}

// maxTree is a max segment tree with argmax over control positions.
type maxTree struct {
	n   int
	key []flow.Cost
	arg []int32
}

func newMaxTree(n int) maxTree {
	size := 1
	for size < n {
		size *= 2
	}
	m := maxTree{n: size, key: make([]flow.Cost, 2*size), arg: make([]int32, 2*size)}
	for i := range m.key {
		m.key[i] = flow.Cost{Tier: math.MinInt64, Dist: math.Inf(-1)}
		m.arg[i] = -1
	}
	return m
}

func (m *maxTree) set(q int, k flow.Cost) {
	i := q + m.n
	m.key[i], m.arg[i] = k, int32(q)
	for i > 1 {
		i /= 2
		if m.key[2*i].Less(m.key[2*i+1]) {
			m.key[i], m.arg[i] = m.key[2*i+1], m.arg[2*i+1]
		} else {
			m.key[i], m.arg[i] = m.key[2*i], m.arg[2*i]
		}
	}
}

// query returns the maximum over positions [a, b) and where it is.
func (m *maxTree) query(a, b int) (flow.Cost, int) {
	best, arg := flow.Cost{Tier: math.MinInt64, Dist: math.Inf(-1)}, -1
	take := func(i int) {
		if best.Less(m.key[i]) || arg < 0 {
			best, arg = m.key[i], int(m.arg[i])
		}
	}
	for a, b = a+m.n, b+m.n; a < b; a, b = a/2, b/2 {
		if a&1 == 1 {
			take(a)
			a++
		}
		if b&1 == 1 {
			b--
			take(b)
		}
	}
	return best, arg
}

// forStrata runs solve on every stratum, GOMAXPROCS at a time, and
// returns the first error in stratum order.
func forStrata(n int, solve func(i int) error) error {
	errs := make([]error, n)
	next := make(chan int)
	var wg sync.WaitGroup
	for w := 0; w < min(n, runtime.GOMAXPROCS(0)); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				errs[i] = solve(i)
			}
		}()
	}
	for i := 0; i < n; i++ {
		next <- i
	}
	close(next)
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}
