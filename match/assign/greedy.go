package assign

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// Errors a caller can branch on; the returned errors wrap them and name the
// option or unit at fault.
var (
	// ErrOption marks an invalid Options value or order name.
	ErrOption = errors.New("invalid matching option")
	// ErrScore marks a score that cannot be matched on (NaN or infinite).
	ErrScore = errors.New("invalid score")
)

// Order is the sequence in which greedy matching processes treated units.
// The zero value is HighFirst.
type Order int

const (
	// HighFirst processes treated units from the highest score down; with a
	// propensity score these are the units hardest to match, so they choose
	// first.
	HighFirst Order = iota
	// LowFirst processes treated units from the lowest score up.
	LowFirst
	// Random processes treated units in a random order drawn from
	// math/rand/v2's PCG seeded with Options.Seed.
	Random
	// UnitOrder processes treated units in ascending index order. The
	// callers hold units in canonical order (ascending unit id, see
	// warehouse.CanonicalOrder), so this is ascending unit id: an order
	// fixed by the data, never by how the engine returned the rows.
	UnitOrder
)

var orderNames = [...]string{
	HighFirst: "high-score-first",
	LowFirst:  "low-score-first",
	Random:    "random",
	UnitOrder: "unit",
}

// String returns the name ParseOrder accepts for o.
func (o Order) String() string {
	if o < 0 || int(o) >= len(orderNames) {
		return fmt.Sprintf("Order(%d)", int(o))
	}
	return orderNames[o]
}

// ParseOrder maps a study-file name to an Order. Names are matched exactly
// (no case folding or trimming): "high-score-first", "low-score-first",
// "random", "unit".
func ParseOrder(s string) (Order, error) {
	for o, name := range orderNames {
		if s == name {
			return Order(o), nil
		}
	}
	return 0, fmt.Errorf("parse matching order %q: use high-score-first, low-score-first, random or unit: %w", s, ErrOption)
}

// Options configures Greedy.
type Options struct {
	// Controls is the number of controls per treated unit, k >= 1.
	Controls int
	// Reuse lets one control serve several treated units (matching with
	// replacement).
	Reuse bool
	// Caliper is the largest allowed |score_t - score_c| on the score's own
	// scale; a distance equal to Caliper is inside. 0 means no caliper.
	// Converting "0.2 SD of the logit" (Austin 2011) into this absolute
	// width is the caller's job.
	Caliper float64
	// Order is the sequence in which treated units choose controls.
	Order Order
	// Seed seeds the PCG generator (rand.NewPCG(Seed, 0)) for Order Random;
	// it is ignored by the other orders.
	Seed uint64
	// Metric chooses the distance that ranks controls inside the caliper;
	// the zero value is the score distance (see Metric).
	Metric Metric
	// Check, when set, is asked now and then during matching (every
	// checkEvery treated units, and inside the flow solver); its error
	// stops the matching and is returned as is. It is how a caller
	// cancels a long matching without this package knowing why. It may
	// be called from several goroutines at once.
	Check func() error
}

// checkEvery is how many treated units greedy matching places between
// two Check calls.
const checkEvery = 4096

// checkAt calls check at every checkEvery-th treated unit.
func checkAt(check func() error, i int) error {
	if check == nil || i%checkEvery != 0 {
		return nil
	}
	return check()
}

func (o Options) validate() error {
	if o.Controls < 1 {
		return fmt.Errorf("option Controls = %d: need at least 1 control per treated unit: %w", o.Controls, ErrOption)
	}
	if math.IsNaN(o.Caliper) || o.Caliper < 0 {
		return fmt.Errorf("option Caliper = %v: need a width >= 0 (0 = no caliper): %w", o.Caliper, ErrOption)
	}
	if o.Order < 0 || int(o.Order) >= len(orderNames) {
		return fmt.Errorf("option Order = %d: not a known order: %w", int(o.Order), ErrOption)
	}
	return o.Metric.validate(o.Caliper)
}

// Set is one matched set: a treated unit and its controls.
type Set struct {
	// ID numbers sets from 1 in the order they were formed.
	ID int
	// Treated is the treated unit's index into the input slices.
	Treated int
	// Controls are the controls' indexes, nearest first (ties by lower
	// index). It holds between 1 and Options.Controls entries.
	Controls []int
	// Distances[j] = |score[Treated] - score[Controls[j]]|, or with a
	// Mahalanobis Options.Metric the metric distance of the pair.
	Distances []float64
}

// Greedy performs greedy nearest-neighbour matching on score.
//
// Unit i is treated when treated[i]. stratum (nil = one stratum) restricts
// matches to units with equal stratum values (exact matching); eligible
// (nil = all) excludes units that may never match, such as those outside
// common support. Treated units are processed in opt.Order and each takes,
// in turn, its opt.Controls nearest available controls in its stratum with
//
//	d = |score_t - score_c| <= opt.Caliper   (when opt.Caliper > 0),
//
// ties in d going to the control with the lower index. Treated units with
// no such control get no Set; sets may hold fewer than opt.Controls
// controls. The package documentation lists the full conventions.
//
// Scores of ineligible units are never read, so they may be NaN; an
// eligible unit with a NaN or infinite score is an error (exclude it with
// eligible instead). Slices of different lengths panic. Indexes must fit in
// an int32.
//
// Cost: O(n log n) time for n units, O(n) memory.
func Greedy(score []float64, treated []bool, stratum []int32, eligible []bool, opt Options) ([]Set, error) {
	n := len(score)
	if len(treated) != n {
		panic(fmt.Sprintf("assign.Greedy: len(treated) = %d, len(score) = %d", len(treated), n))
	}
	if stratum != nil && len(stratum) != n {
		panic(fmt.Sprintf("assign.Greedy: len(stratum) = %d, len(score) = %d", len(stratum), n))
	}
	if eligible != nil && len(eligible) != n {
		panic(fmt.Sprintf("assign.Greedy: len(eligible) = %d, len(score) = %d", len(eligible), n))
	}
	if n > math.MaxInt32-2 {
		panic(fmt.Sprintf("assign.Greedy: %d units exceed the int32 index limit", n))
	}
	if err := opt.validate(); err != nil {
		return nil, fmt.Errorf("greedy matching: %w", err)
	}
	if opt.Metric.Kind != Logit {
		return greedyMetric(score, treated, stratum, eligible, opt)
	}

	nt, nc := 0, 0
	for i, s := range score {
		if eligible != nil && !eligible[i] {
			continue
		}
		if math.IsNaN(s) || math.IsInf(s, 0) {
			return nil, fmt.Errorf("greedy matching: unit %d has score %v; exclude it via eligible or fix the score: %w", i, s, ErrScore)
		}
		if treated[i] {
			nt++
		} else {
			nc++
		}
	}
	trt := make([]int32, 0, nt)
	keys := make([]controlKey, 0, nc)
	for i, s := range score {
		if eligible != nil && !eligible[i] {
			continue
		}
		if treated[i] {
			trt = append(trt, int32(i))
		} else {
			keys = append(keys, controlKey{stratum: stratumOf(stratum, i), unit: int32(i), score: s})
		}
	}
	orderTreated(trt, score, opt)
	p := newPool(keys, !opt.Reuse)

	m := matcher{pool: p, k: opt.Controls, caliper: opt.Caliper}
	sets := make([]Set, 0, nt)
	for i, t := range trt {
		if err := checkAt(opt.Check, i); err != nil {
			return nil, err
		}
		sp, ok := p.span(stratumOf(stratum, int(t)))
		if !ok {
			continue
		}
		var got int
		if opt.Reuse {
			got = m.nearestWithReuse(score[t], sp)
		} else {
			got = m.nearestWithoutReuse(score[t], sp)
		}
		if got == 0 {
			continue
		}
		ctl, dist := m.emit(got)
		sets = append(sets, Set{ID: len(sets) + 1, Treated: int(t), Controls: ctl, Distances: dist})
	}
	return sets, nil
}

func stratumOf(stratum []int32, i int) int32 {
	if stratum == nil {
		return 0
	}
	return stratum[i]
}

// orderTreated sorts trt (ascending indexes on entry) into processing order.
func orderTreated(trt []int32, score []float64, opt Options) {
	switch opt.Order {
	case HighFirst:
		slices.SortFunc(trt, func(a, b int32) int {
			if c := cmp.Compare(score[b], score[a]); c != 0 {
				return c
			}
			return cmp.Compare(a, b)
		})
	case LowFirst:
		slices.SortFunc(trt, func(a, b int32) int {
			if c := cmp.Compare(score[a], score[b]); c != 0 {
				return c
			}
			return cmp.Compare(a, b)
		})
	case Random:
		r := rand.New(rand.NewPCG(opt.Seed, 0))
		r.Shuffle(len(trt), func(i, j int) { trt[i], trt[j] = trt[j], trt[i] })
	case UnitOrder:
		// already ascending
	}
}

type controlKey struct {
	stratum int32
	unit    int32
	score   float64
}

type span struct{ lo, hi int } // half-open range of sorted positions

// pool holds the eligible controls sorted by (stratum, score, index).
type pool struct {
	score    []float64 // score at each sorted position
	unit     []int32   // input index at each sorted position
	runStart []int32   // first position of the run of equal (stratum, score)
	runEnd   []int32   // last position of that run
	strata   map[int32]span
	// Without reuse: union-find "next unused position". nextR[i] leads to
	// the smallest unused position >= i (m = none); nextL[i+1] leads to
	// one more than the largest unused position <= i (0 = none).
	nextR, nextL []int32
}

func newPool(keys []controlKey, track bool) *pool {
	slices.SortFunc(keys, func(a, b controlKey) int {
		if c := cmp.Compare(a.stratum, b.stratum); c != 0 {
			return c
		}
		if c := cmp.Compare(a.score, b.score); c != 0 {
			return c
		}
		return cmp.Compare(a.unit, b.unit)
	})
	m := len(keys)
	p := &pool{
		score:    make([]float64, m),
		unit:     make([]int32, m),
		runStart: make([]int32, m),
		runEnd:   make([]int32, m),
		strata:   make(map[int32]span),
	}
	lo := 0
	for i, k := range keys {
		p.score[i], p.unit[i] = k.score, k.unit
		if i > 0 && k.stratum == keys[i-1].stratum && k.score == keys[i-1].score {
			p.runStart[i] = p.runStart[i-1]
		} else {
			p.runStart[i] = int32(i)
		}
		if i+1 == m || keys[i+1].stratum != k.stratum {
			p.strata[k.stratum] = span{lo, i + 1}
			lo = i + 1
		}
	}
	for i := m - 1; i >= 0; i-- {
		if i+1 < m && p.runStart[i+1] == p.runStart[i] {
			p.runEnd[i] = p.runEnd[i+1]
		} else {
			p.runEnd[i] = int32(i)
		}
	}
	if track {
		p.nextR = make([]int32, m+1)
		p.nextL = make([]int32, m+1)
		for i := range p.nextR {
			p.nextR[i] = int32(i)
			p.nextL[i] = int32(i)
		}
	}
	return p
}

func (p *pool) span(s int32) (span, bool) {
	sp, ok := p.strata[s]
	return sp, ok
}

// find follows parent links with path halving (Tarjan & van Leeuwen 1984).
func find(parent []int32, i int) int {
	for {
		j := int(parent[i])
		if j == i {
			return i
		}
		k := int(parent[j])
		parent[i] = int32(k)
		i = k
	}
}

// right returns the smallest unused position >= i, or len(p.score).
func (p *pool) right(i int) int { return find(p.nextR, i) }

// left returns the largest unused position <= i, or -1 (i may be -1).
func (p *pool) left(i int) int { return find(p.nextL, i+1) - 1 }

func (p *pool) use(i int) {
	p.nextR[i] = int32(i + 1)
	p.nextL[i+1] = int32(i)
}

// lowerBound returns the first position in sp with score >= s.
func (p *pool) lowerBound(s float64, sp span) int {
	i, _ := slices.BinarySearch(p.score[sp.lo:sp.hi], s)
	return sp.lo + i
}

type candidate struct {
	pos  int
	dist float64
}

// before orders candidates by (distance, input index).
func (p *pool) before(a, b candidate) bool {
	if a.dist != b.dist {
		return a.dist < b.dist
	}
	return p.unit[a.pos] < p.unit[b.pos]
}

// matcher carries the per-call state and the output buffers.
type matcher struct {
	pool    *pool
	k       int
	caliper float64
	chosen  []candidate // controls of the treated unit in hand
	ctlBuf  []int       // backing storage handed out to Sets in chunks
	distBuf []float64
}

func (m *matcher) inside(d float64) bool { return m.caliper == 0 || d <= m.caliper }

// bestLeft finds the nearest unused control below position x (all such
// controls have score < s) and, among those at the same distance, the one
// with the lowest input index. Equal distances form a contiguous block of
// positions because rounding of s - v is monotone in v; inside a run of
// equal scores the lowest index is the run's first unused position.
func (m *matcher) bestLeft(x int, sp span, s float64) (candidate, bool) {
	p := m.pool
	l := p.left(x - 1)
	if l < sp.lo {
		return candidate{}, false
	}
	d := s - p.score[l]
	best := candidate{p.right(int(p.runStart[l])), d}
	for {
		a := int(p.runStart[l])
		if a == sp.lo {
			break
		}
		l = p.left(a - 1)
		if l < sp.lo || s-p.score[l] != d {
			break
		}
		if c := (candidate{p.right(int(p.runStart[l])), d}); p.before(c, best) {
			best = c
		}
	}
	return best, true
}

// bestRight is bestLeft's mirror for positions >= x (scores >= s). x is the
// start of a run, so the first unused position of each run met is that
// run's lowest unused index.
func (m *matcher) bestRight(x int, sp span, s float64) (candidate, bool) {
	p := m.pool
	r := p.right(x)
	if r >= sp.hi {
		return candidate{}, false
	}
	d := p.score[r] - s
	best := candidate{r, d}
	for {
		e := int(p.runEnd[r])
		if e+1 >= sp.hi {
			break
		}
		r = p.right(e + 1)
		if r >= sp.hi || p.score[r]-s != d {
			break
		}
		if c := (candidate{r, d}); p.before(c, best) {
			best = c
		}
	}
	return best, true
}

// nearestWithoutReuse fills m.chosen with up to k nearest unused controls,
// marking each used as soon as it is taken, and returns how many.
func (m *matcher) nearestWithoutReuse(s float64, sp span) int {
	p := m.pool
	x := p.lowerBound(s, sp)
	m.chosen = m.chosen[:0]
	for len(m.chosen) < m.k {
		l, lok := m.bestLeft(x, sp, s)
		r, rok := m.bestRight(x, sp, s)
		var c candidate
		switch {
		case lok && rok:
			c = r
			if p.before(l, r) {
				c = l
			}
		case lok:
			c = l
		case rok:
			c = r
		default:
			return len(m.chosen)
		}
		if !m.inside(c.dist) {
			break
		}
		p.use(c.pos)
		m.chosen = append(m.chosen, c)
	}
	return len(m.chosen)
}

// nearestWithReuse fills m.chosen with the k nearest controls by
// (distance, index) and returns how many. Walking outwards run by run, it
// collects from each run its first k positions (its k lowest indexes) until
// k are held and the distance grows; the union holds the answer, which a
// sort of at most a few times k candidates picks out.
func (m *matcher) nearestWithReuse(s float64, sp span) int {
	p := m.pool
	x := p.lowerBound(s, sp)
	m.chosen = m.chosen[:0]
	took, last := 0, math.Inf(-1)
	for e := x - 1; e >= sp.lo; {
		a := int(p.runStart[e])
		d := s - p.score[e]
		if !m.inside(d) || (took >= m.k && d != last) {
			break
		}
		for q := a; q <= e && q < a+m.k; q++ {
			m.chosen = append(m.chosen, candidate{q, d})
		}
		took += min(m.k, e-a+1)
		last = d
		e = a - 1
	}
	took, last = 0, math.Inf(-1)
	for a := x; a < sp.hi; {
		e := int(p.runEnd[a])
		d := p.score[a] - s
		if !m.inside(d) || (took >= m.k && d != last) {
			break
		}
		for q := a; q <= e && q < a+m.k; q++ {
			m.chosen = append(m.chosen, candidate{q, d})
		}
		took += min(m.k, e-a+1)
		last = d
		a = e + 1
	}
	slices.SortFunc(m.chosen, func(a, b candidate) int {
		if c := cmp.Compare(a.dist, b.dist); c != 0 {
			return c
		}
		return cmp.Compare(p.unit[a.pos], p.unit[b.pos])
	})
	if len(m.chosen) > m.k {
		m.chosen = m.chosen[:m.k]
	}
	return len(m.chosen)
}

// emit copies the first got chosen controls into freshly carved,
// capacity-limited slices of a shared buffer, so Sets do not alias.
func (m *matcher) emit(got int) ([]int, []float64) {
	if len(m.ctlBuf) < got {
		const chunk = 4096
		m.ctlBuf = make([]int, chunk*m.k)
		m.distBuf = make([]float64, chunk*m.k)
	}
	ctl := m.ctlBuf[:got:got]
	dist := m.distBuf[:got:got]
	m.ctlBuf, m.distBuf = m.ctlBuf[got:], m.distBuf[got:]
	for j, c := range m.chosen[:got] {
		ctl[j] = int(m.pool.unit[c.pos])
		dist[j] = c.dist
	}
	return ctl, dist
}
