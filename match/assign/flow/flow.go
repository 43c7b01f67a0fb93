package flow

import (
	"errors"
	"fmt"
	"math"
)

// ErrNoPath reports a node with excess that can reach no node with deficit:
// the supplies cannot be routed (a network built by package assign always
// has a route through the hub, so this marks a bug).
var ErrNoPath = errors.New("no augmenting path")

// Cost is a lexicographic cost: Tier is compared first, Dist breaks ties.
type Cost struct {
	Tier int64
	Dist float64
}

// Add returns a + b.
func (a Cost) Add(b Cost) Cost { return Cost{a.Tier + b.Tier, a.Dist + b.Dist} }

// Sub returns a - b.
func (a Cost) Sub(b Cost) Cost { return Cost{a.Tier - b.Tier, a.Dist - b.Dist} }

// Less orders costs lexicographically.
func (a Cost) Less(b Cost) bool {
	if a.Tier != b.Tier {
		return a.Tier < b.Tier
	}
	return a.Dist < b.Dist
}

// Neg returns -a.
func (a Cost) Neg() Cost { return Cost{-a.Tier, -a.Dist} }

var infCost = Cost{math.MaxInt64, math.Inf(1)}

// Seg is one of up to two parallel arcs between a node and the hub. Every
// treated node has the same segments, and so has every control node.
type Seg struct {
	Cap  int32
	Cost Cost
}

// Spec describes the hub arcs and the supplies. Up arcs run node -> hub,
// Down arcs hub -> node. Supplies are per node (positive = excess to send);
// the hub's supply balances the total to zero.
type Spec struct {
	UpT, DownT, UpC, DownC [2]Seg
	SupplyT, SupplyC       int64
}

// Network is a bipartite flow network with a hub, solved incrementally:
// arcs may be added between calls to Solve, which keeps the current flow.
type Network struct {
	nt, nc, hub int
	spec        Spec
	// Candidate arcs treated -> control, capacity 1.
	from, to []int32 // treated index, control index
	cost     []float64
	flow     []bool
	// CSR indexes rebuilt by Solve.
	outStart, outArc []int32
	inStart, inArc   []int32
	indexed          int // arcs covered by the CSR
	// Flows on hub segments, per node (treated then control).
	upF, downF [][2]int32
	h          []Cost
	excess     []int64

	// Dijkstra scratch.
	dist      []Cost
	stamp     []uint32
	done      []uint32
	epoch     uint32
	parent    []int32
	parentArc []int32 // >= 0 candidate arc; < 0 hub code
	heap      []item
	touched   []int32
	settled   []int32
	hubTree   segTree // hub -> v arcs, key c(hub,v) - h(v)
	inTree    segTree // v -> hub arcs, key c(v,hub) + h(v)
	extracted []int32
	pulling   bool // the current search runs backwards from a deficit
	fresh     bool // zero flow and zero potentials: Solve may warm-start

	// WarmStarts counts the solves that began with the nearest-partner
	// start (see warmStart).
	WarmStarts int

	// Augmentations counts the unit augmentations done so far.
	Augmentations int
	// Pops counts heap pops over all searches, a measure of search work.
	Pops int

	// Check, when set, is asked every checkEvery augmentations; its
	// error stops Solve (a cancelled run), and the network is left
	// unusable.
	Check func() error
}

// checkEvery is how many augmentations pass between two Check calls: each
// is one shortest-path search, so a few hundred take milliseconds.
const checkEvery = 256

// checkNow calls Check when the augmentation count reaches a multiple of
// checkEvery.
func (g *Network) checkNow() error {
	if g.Check == nil || g.Augmentations%checkEvery != 0 {
		return nil
	}
	return g.Check()
}

// New returns a network with nt treated and nc control nodes, no candidate
// arcs and zero flow. The initial potentials are zero, valid because every
// hub arc cost must be >= 0 (checked).
func New(nt, nc int, spec Spec) *Network {
	for _, s := range [...][2]Seg{spec.UpT, spec.DownT, spec.UpC, spec.DownC} {
		for _, g := range s {
			if g.Cap < 0 || g.Cost.Less(Cost{}) {
				panic("flow.New: hub segments need capacity >= 0 and cost >= 0")
			}
		}
	}
	n := nt + nc + 1
	g := &Network{nt: nt, nc: nc, hub: nt + nc, spec: spec,
		upF: make([][2]int32, nt+nc), downF: make([][2]int32, nt+nc),
		h: make([]Cost, n), excess: make([]int64, n),
		dist: make([]Cost, n), stamp: make([]uint32, n), done: make([]uint32, n),
		parent: make([]int32, n), parentArc: make([]int32, n)}
	var total int64
	for t := 0; t < nt; t++ {
		g.excess[t] = spec.SupplyT
		total += spec.SupplyT
	}
	for c := 0; c < nc; c++ {
		g.excess[nt+c] = spec.SupplyC
		total += spec.SupplyC
	}
	g.excess[g.hub] = -total
	g.fresh = true
	g.hubTree = newSegTree(nt + nc)
	g.inTree = newSegTree(nt + nc)
	for v := 0; v < nt+nc; v++ {
		g.updateLeaf(v)
	}
	return g
}

// Reset returns the network to zero flow and zero potentials, keeping its
// arcs. A cold restart after new arcs keeps the later searches as local as
// the first: saturating the new arcs instead (the warm restart) leaves
// excesses whose searches shift the potentials of whole regions by the
// penalty Tier, which the check against non-candidate pairs then rejects.
// After Reset, Solve warm-starts again as after New (see warmStart).
func (g *Network) Reset() {
	clear(g.flow)
	clear(g.upF)
	clear(g.downF)
	clear(g.h)
	var total int64
	for v := 0; v < g.hub; v++ {
		g.excess[v] = g.spec.SupplyC
		if g.isT(v) {
			g.excess[v] = g.spec.SupplyT
		}
		total += g.excess[v]
	}
	g.excess[g.hub] = -total
	g.fresh = true
	for v := 0; v < g.hub; v++ {
		g.updateLeaf(v)
	}
}

// AddArc adds the candidate arc treated t -> control c with cost d >= 0 and
// zero flow. The caller must not add the same pair twice.
func (g *Network) AddArc(t, c int, d float64) {
	g.from = append(g.from, int32(t))
	g.to = append(g.to, int32(c))
	g.cost = append(g.cost, d)
	g.flow = append(g.flow, false)
}

// Arcs returns the number of candidate arcs.
func (g *Network) Arcs() int { return len(g.from) }

// Arc returns candidate arc a: its treated and control index, cost and
// whether it carries flow.
func (g *Network) Arc(a int) (t, c int, d float64, used bool) {
	return int(g.from[a]), int(g.to[a]), g.cost[a], g.flow[a]
}

// PotentialT returns the potential of treated node t; PotentialC of control c.
func (g *Network) PotentialT(t int) Cost { return g.h[t] }

// PotentialC returns the potential of control node c.
func (g *Network) PotentialC(c int) Cost { return g.h[g.nt+c] }

func (g *Network) isT(v int) bool { return v < g.nt }

func (g *Network) segs(v int) (up, down *[2]Seg) {
	if g.isT(v) {
		return &g.spec.UpT, &g.spec.DownT
	}
	return &g.spec.UpC, &g.spec.DownC
}

// Hub arc codes, stored as -(1+code) in parentArc.
const (
	upFwd   = 0 // v -> hub along up segment i (code + i)
	downRev = 2 // v -> hub cancelling down segment i
	downFwd = 4 // hub -> v along down segment i
	upRev   = 6 // hub -> v cancelling up segment i
)

// toHub returns the cheapest residual arc v -> hub.
func (g *Network) toHub(v int) (Cost, int, bool) {
	up, down := g.segs(v)
	best, code, ok := infCost, -1, false
	for i := 0; i < 2; i++ {
		if g.upF[v][i] < up[i].Cap && up[i].Cost.Less(best) {
			best, code, ok = up[i].Cost, upFwd+i, true
		}
		if g.downF[v][i] > 0 && down[i].Cost.Neg().Less(best) {
			best, code, ok = down[i].Cost.Neg(), downRev+i, true
		}
	}
	return best, code, ok
}

// fromHub returns the cheapest residual arc hub -> v.
func (g *Network) fromHub(v int) (Cost, int, bool) {
	up, down := g.segs(v)
	best, code, ok := infCost, -1, false
	for i := 0; i < 2; i++ {
		if g.downF[v][i] < down[i].Cap && down[i].Cost.Less(best) {
			best, code, ok = down[i].Cost, downFwd+i, true
		}
		if g.upF[v][i] > 0 && up[i].Cost.Neg().Less(best) {
			best, code, ok = up[i].Cost.Neg(), upRev+i, true
		}
	}
	return best, code, ok
}

func (g *Network) updateLeaf(v int) {
	if c, _, ok := g.fromHub(v); ok {
		g.hubTree.set(v, c.Sub(g.h[v]))
	} else {
		g.hubTree.set(v, infCost)
	}
	if c, _, ok := g.toHub(v); ok {
		g.inTree.set(v, c.Add(g.h[v]))
	} else {
		g.inTree.set(v, infCost)
	}
}

// reduced returns c + h(u) - h(v), with a Dist below zero from rounding
// treated as zero when the Tier is zero.
func (g *Network) reduced(c Cost, u, v int) Cost {
	r := c.Add(g.h[u]).Sub(g.h[v])
	if r.Tier == 0 && r.Dist < 0 {
		r.Dist = 0
	}
	return r
}

func (g *Network) index() {
	if g.indexed == len(g.from) && g.outStart != nil {
		return
	}
	m := len(g.from)
	g.outStart = countStart(g.outStart, g.from, g.nt)
	g.inStart = countStart(g.inStart, g.to, g.nc)
	g.outArc = fill(g.outArc, g.outStart, g.from, m)
	g.inArc = fill(g.inArc, g.inStart, g.to, m)
	g.indexed = m
}

func countStart(start []int32, key []int32, n int) []int32 {
	start = append(start[:0], make([]int32, n+1)...)
	for _, k := range key {
		start[k+1]++
	}
	for i := 0; i < n; i++ {
		start[i+1] += start[i]
	}
	return start
}

func fill(arc []int32, start []int32, key []int32, m int) []int32 {
	if cap(arc) < m {
		arc = make([]int32, m)
	}
	arc = arc[:m]
	next := append([]int32(nil), start...)
	for a, k := range key {
		arc[next[k]] = int32(a)
		next[k]++
	}
	return arc
}

// Solve routes all excess to the deficits at minimum cost, starting from
// the current flow (after New or Reset, from the warm start of warmStart
// when SupplyC < 0). Arcs added since the last call whose reduced cost is
// below -tol are first saturated (which keeps every residual reduced cost
// >= 0 and moves one unit of excess), the standard restart of successive
// shortest paths after new arcs (Ahuja, Magnanti & Orlin 1993, section 9.7).
func (g *Network) Solve(tol float64) error {
	g.index()
	if g.fresh {
		g.fresh = false
		if g.spec.SupplyC < 0 {
			g.warmStart()
		}
	}
	for a := range g.from {
		if g.flow[a] {
			continue
		}
		t, c := int(g.from[a]), g.nt+int(g.to[a])
		r := Cost{0, g.cost[a]}.Add(g.h[t]).Sub(g.h[c])
		if r.Tier < 0 || (r.Tier == 0 && r.Dist < -tol) {
			g.flow[a] = true
			g.excess[t]--
			g.excess[c]++
		}
	}
	// Push every excess of a unit node to the nearest deficit, then pull
	// every remaining deficit of a unit node from the nearest excess. In
	// full matching the hub's excess (spare controls) is thus fetched by
	// searches that start at the uncovered control, which are local; a
	// search from the hub would start at every treated node at once. (The
	// opposite order was measured slower: pulls then spread through the
	// controls already attached to each treated unit.) After warmStart the
	// hub usually has a deficit instead, and the pushes end at it.
	for v := 0; v < g.hub; v++ {
		for g.excess[v] > 0 {
			if err := g.augment(v); err != nil {
				return err
			}
			if err := g.checkNow(); err != nil {
				return err
			}
		}
	}
	for v := 0; v < g.hub; v++ {
		for g.excess[v] < 0 {
			if err := g.pull(v); err != nil {
				return err
			}
			if err := g.checkNow(); err != nil {
				return err
			}
		}
	}
	for g.excess[g.hub] > 0 {
		if err := g.augment(g.hub); err != nil {
			return err
		}
	}
	for g.excess[g.hub] < 0 {
		if err := g.pull(g.hub); err != nil {
			return err
		}
	}
	for g.excess[g.hub] > 0 {
		if err := g.augment(g.hub); err != nil {
			return err
		}
	}
	return nil
}

type item struct {
	k    Cost
	v    int32
	virt bool // drawn from the hub's segment tree: a relaxation hub -> v
	term bool // v has a deficit: among equal keys it pops first
}

// before orders heap items by key, deficit nodes first among equal keys,
// so a search on a plateau of zero reduced costs (tied scores) stops as
// soon as it can instead of settling the whole plateau.
func (a item) before(b item) bool {
	if a.k != b.k {
		return a.k.Less(b.k)
	}
	return a.term && !b.term
}

func (g *Network) push(it item) {
	h := append(g.heap, it)
	i := len(h) - 1
	for i > 0 {
		p := (i - 1) / 2
		if !h[i].before(h[p]) {
			break
		}
		h[i], h[p] = h[p], h[i]
		i = p
	}
	g.heap = h
}

func (g *Network) pop() item {
	h := g.heap
	top := h[0]
	n := len(h) - 1
	h[0] = h[n]
	h = h[:n]
	i := 0
	for {
		l := 2*i + 1
		if l >= n {
			break
		}
		m := l
		if r := l + 1; r < n && h[r].before(h[l]) {
			m = r
		}
		if !h[m].before(h[i]) {
			break
		}
		h[i], h[m] = h[m], h[i]
		i = m
	}
	g.heap = h
	return top
}

func (g *Network) touch(v int) {
	if g.stamp[v] != g.epoch {
		g.stamp[v] = g.epoch
		g.dist[v] = infCost
		g.touched = append(g.touched, int32(v))
	}
}

func (g *Network) relax(v int, d Cost, from int, arc int32) {
	g.touch(v)
	if g.done[v] == g.epoch || !d.Less(g.dist[v]) {
		return
	}
	g.dist[v] = d
	g.parent[v] = int32(from)
	g.parentArc[v] = arc
	term := g.excess[v] < 0
	if g.pulling {
		term = g.excess[v] > 0
	}
	g.push(item{k: d, v: int32(v), term: term})
}

// drawHub pushes the next hub neighbour from the segment tree, if any.
func (g *Network) drawHub() {
	tree := &g.hubTree
	if g.pulling {
		tree = &g.inTree
	}
	v, key := tree.min()
	if v < 0 || key == infCost {
		return
	}
	tree.set(v, infCost)
	g.extracted = append(g.extracted, int32(v))
	r := key.Add(g.h[g.hub])
	if g.pulling {
		r = key.Sub(g.h[g.hub])
	}
	if r.Tier == 0 && r.Dist < 0 {
		r.Dist = 0
	}
	g.push(item{k: g.dist[g.hub].Add(r), v: int32(v), virt: true})
}

// augment sends one unit from source s to the nearest deficit node.
func (g *Network) augment(s int) error {
	g.pulling = false
	g.epoch++
	if g.epoch == 0 { // wrapped: clear the stamps
		clear(g.stamp)
		clear(g.done)
		g.epoch = 1
	}
	g.heap, g.touched, g.settled, g.extracted = g.heap[:0], g.touched[:0], g.settled[:0], g.extracted[:0]
	g.touch(s)
	g.dist[s] = Cost{}
	g.push(item{v: int32(s)})
	target := -1
	for len(g.heap) > 0 {
		it := g.pop()
		g.Pops++
		v := int(it.v)
		if it.virt {
			g.drawHub()
			_, code, _ := g.fromHub(v)
			g.relax(v, it.k, g.hub, int32(-1-code))
			continue
		}
		if g.done[v] == g.epoch || g.dist[v].Less(it.k) {
			continue
		}
		g.done[v] = g.epoch
		g.settled = append(g.settled, int32(v))
		if v != s && g.excess[v] < 0 {
			target = v
			break
		}
		d := g.dist[v]
		switch {
		case v == g.hub:
			g.drawHub()
			continue
		case g.isT(v):
			for _, a := range g.outArc[g.outStart[v]:g.outStart[v+1]] {
				if g.flow[a] {
					continue
				}
				c := g.nt + int(g.to[a])
				g.relax(c, d.Add(g.reduced(Cost{0, g.cost[a]}, v, c)), v, a)
			}
		default:
			c := v - g.nt
			for _, a := range g.inArc[g.inStart[c]:g.inStart[c+1]] {
				if !g.flow[a] {
					continue
				}
				t := int(g.from[a])
				g.relax(t, d.Add(g.reduced(Cost{0, -g.cost[a]}, v, t)), v, a)
			}
		}
		if hc, code, ok := g.toHub(v); ok {
			g.relax(g.hub, d.Add(g.reduced(hc, v, g.hub)), v, int32(-1-code))
		}
	}
	if target < 0 {
		return fmt.Errorf("route excess of node %d: %w", s, ErrNoPath)
	}
	D := g.dist[target]
	for _, v := range g.settled {
		g.h[v] = g.h[v].Add(g.dist[v]).Sub(D)
	}
	// Walk the path back, flipping flows.
	for v := target; v != s; {
		p := int(g.parent[v])
		g.apply(p, v, g.parentArc[v])
		v = p
	}
	g.excess[s]--
	g.excess[target]++
	for _, v := range g.settled {
		if int(v) != g.hub {
			g.updateLeaf(int(v))
		}
	}
	for _, v := range g.extracted {
		g.updateLeaf(int(v))
	}
	g.Augmentations++
	return nil
}

// apply sends one unit along the residual arc u -> w (a >= 0: candidate
// arc; a < 0: hub arc code).
func (g *Network) apply(u, w int, a int32) {
	if a >= 0 {
		g.flow[a] = g.isT(u)
		return
	}
	code := int(-1 - a)
	switch {
	case code < downRev:
		g.upF[u][code-upFwd]++
	case code < downFwd:
		g.downF[u][code-downRev]--
	case code < upRev:
		g.downF[w][code-downFwd]++
	default:
		g.upF[w][code-upRev]--
	}
	if w != g.hub {
		g.updateLeaf(w)
	} else {
		g.updateLeaf(u)
	}
}

// pull brings one unit to deficit node tgt from the nearest excess node,
// by Dijkstra's algorithm on the reversed residual graph: dist(u) is the
// reduced-cost distance from u to tgt. Settled nodes get h(u) += D -
// dist(u), the mirror image of augment's update (again the textbook update
// shifted by a constant), which keeps every reduced cost >= 0 and makes
// the path's reduced costs zero.
func (g *Network) pull(tgt int) error {
	g.pulling = true
	defer func() { g.pulling = false }()
	g.epoch++
	if g.epoch == 0 {
		clear(g.stamp)
		clear(g.done)
		g.epoch = 1
	}
	g.heap, g.touched, g.settled, g.extracted = g.heap[:0], g.touched[:0], g.settled[:0], g.extracted[:0]
	g.touch(tgt)
	g.dist[tgt] = Cost{}
	g.push(item{v: int32(tgt)})
	source := -1
	for len(g.heap) > 0 {
		it := g.pop()
		g.Pops++
		v := int(it.v)
		if it.virt {
			g.drawHub()
			_, code, _ := g.toHub(v)
			g.relax(v, it.k, g.hub, int32(-1-code))
			continue
		}
		if g.done[v] == g.epoch || g.dist[v].Less(it.k) {
			continue
		}
		g.done[v] = g.epoch
		g.settled = append(g.settled, int32(v))
		if v != tgt && g.excess[v] > 0 {
			source = v
			break
		}
		d := g.dist[v]
		switch {
		case v == g.hub:
			g.drawHub()
			continue
		case g.isT(v): // residual c -> t exists where t -> c carries flow
			for _, a := range g.outArc[g.outStart[v]:g.outStart[v+1]] {
				if !g.flow[a] {
					continue
				}
				c := g.nt + int(g.to[a])
				g.relax(c, d.Add(g.reduced(Cost{0, -g.cost[a]}, c, v)), v, a)
			}
		default: // residual t -> c exists where it carries no flow
			c := v - g.nt
			for _, a := range g.inArc[g.inStart[c]:g.inStart[c+1]] {
				if g.flow[a] {
					continue
				}
				t := int(g.from[a])
				g.relax(t, d.Add(g.reduced(Cost{0, g.cost[a]}, t, v)), v, a)
			}
		}
		if hc, code, ok := g.fromHub(v); ok {
			g.relax(g.hub, d.Add(g.reduced(hc, g.hub, v)), v, int32(-1-code))
		}
	}
	if source < 0 {
		return fmt.Errorf("fill deficit of node %d: %w", tgt, ErrNoPath)
	}
	D := g.dist[source]
	for _, v := range g.settled {
		g.h[v] = g.h[v].Add(D).Sub(g.dist[v])
	}
	for v := source; v != tgt; {
		w := int(g.parent[v])
		g.apply(v, w, g.parentArc[v])
		v = w
	}
	g.excess[source]--
	g.excess[tgt]++
	for _, v := range g.settled {
		if int(v) != g.hub {
			g.updateLeaf(int(v))
		}
	}
	for _, v := range g.extracted {
		g.updateLeaf(int(v))
	}
	g.Augmentations++
	return nil
}

// Balanced reports whether every supply has been routed.
func (g *Network) Balanced() bool {
	for _, e := range g.excess {
		if e != 0 {
			return false
		}
	}
	return true
}

// CheckArcs reports whether every residual arc of the network — candidate
// arcs in both directions and hub arcs — has reduced cost >= -tol under the
// current potentials (lexicographically: a Tier below zero always fails),
// and the flow respects all capacities. With Balanced this is the
// optimality condition of min-cost flow (Ahuja, Magnanti & Orlin 1993,
// Theorem 9.3) for the arcs in the network.
func (g *Network) CheckArcs(tol float64) bool {
	bad := func(r Cost) bool { return r.Tier < 0 || (r.Tier == 0 && r.Dist < -tol) }
	for a := range g.from {
		t, c := int(g.from[a]), g.nt+int(g.to[a])
		r := Cost{0, g.cost[a]}.Add(g.h[t]).Sub(g.h[c])
		if g.flow[a] {
			r = r.Neg()
		}
		if bad(r) {
			return false
		}
	}
	for v := 0; v < g.hub; v++ {
		up, down := g.segs(v)
		for i := 0; i < 2; i++ {
			ru := up[i].Cost.Add(g.h[v]).Sub(g.h[g.hub])
			rd := down[i].Cost.Add(g.h[g.hub]).Sub(g.h[v])
			if g.upF[v][i] < 0 || g.upF[v][i] > up[i].Cap || g.downF[v][i] < 0 || g.downF[v][i] > down[i].Cap {
				return false
			}
			if (g.upF[v][i] < up[i].Cap && bad(ru)) || (g.upF[v][i] > 0 && bad(ru.Neg())) ||
				(g.downF[v][i] < down[i].Cap && bad(rd)) || (g.downF[v][i] > 0 && bad(rd.Neg())) {
				return false
			}
		}
	}
	// Flow conservation with the supplies: node in - out = -supply.
	net := make([]int64, g.hub+1)
	for a := range g.from {
		if g.flow[a] {
			net[g.from[a]]++
			net[g.nt+int(g.to[a])]--
		}
	}
	for v := 0; v < g.hub; v++ {
		for i := 0; i < 2; i++ {
			net[v] += int64(g.upF[v][i]) - int64(g.downF[v][i])
			net[g.hub] -= int64(g.upF[v][i]) - int64(g.downF[v][i])
		}
	}
	for v := 0; v < g.hub; v++ {
		want := g.spec.SupplyC
		if g.isT(v) {
			want = g.spec.SupplyT
		}
		if net[v] != want {
			return false
		}
	}
	return true
}

// segTree is a min segment tree over node keys with the argmin.
type segTree struct {
	n   int
	key []Cost
	arg []int32
}

func newSegTree(n int) segTree {
	size := 1
	for size < n {
		size *= 2
	}
	s := segTree{n: size, key: make([]Cost, 2*size), arg: make([]int32, 2*size)}
	for i := range s.key {
		s.key[i] = infCost
		s.arg[i] = -1
	}
	return s
}

func (s *segTree) set(v int, k Cost) {
	i := v + s.n
	s.key[i], s.arg[i] = k, int32(v)
	for i > 1 {
		i /= 2
		l, r := 2*i, 2*i+1
		if s.key[r].Less(s.key[l]) {
			s.key[i], s.arg[i] = s.key[r], s.arg[r]
		} else {
			s.key[i], s.arg[i] = s.key[l], s.arg[l]
		}
	}
}

func (s *segTree) min() (int, Cost) {
	if s.n == 0 {
		return -1, infCost
	}
	return int(s.arg[1]), s.key[1]
}
