package flow

// warmStart replaces the all-zero start of a network whose controls demand
// flow (SupplyC < 0, the full-matching network) by a pseudo-flow that
// already satisfies most demands and is optimal for its own excesses, so
// that successive shortest paths only has to repair it locally.
//
// Why: from zero flow, a treated unit whose nearby controls were all taken
// by earlier searches can reach a free control only through the hub, which
// has excess (the spare controls) and so is not a search target; its
// search then leaves the hub towards every treated unit of equal
// potential, O(n) work per augmentation and O(n²) in all. Started here,
// the hub ends up with a deficit, so the remaining searches stop as soon
// as they reach it and never expand out of it.
//
// The start, for zero flow and zero potentials:
//
//   - each control c gets the potential h(c) = m(c), the cheaper of its
//     cheapest candidate arc and its cheapest hub -> c segment with
//     capacity (Tier 0 before Tier 1), and that cheapest arc (or segment)
//     carries c's unit of demand. Every treated and the hub keep
//     potential 0.
//   - a treated unit t that received more than its supply (several
//     controls chose it) takes the surplus from the hub along zero-cost
//     hub -> t segments, up to their capacity; any rest stays as a
//     deficit of t for the searches.
//
// Every residual arc then has reduced cost >= 0: a candidate arc t -> c
// has d - m(c) >= 0 because m(c) is c's cheapest arc; c -> hub has
// cost + m(c) >= 0 (all hub costs are >= 0); hub -> c has
// cost - m(c) >= 0 by the choice of m(c); arcs at t and at the hub have
// their own cost >= 0; and every arc carrying flow has reduced cost
// exactly 0, so its reverse has 0 too. These are the reduced-cost
// optimality conditions of a pseudo-flow (Ahuja, Magnanti & Orlin 1993,
// section 9.7), which is all successive shortest paths needs to start
// from. In the edge-cover reading (package assign, Full) this is the dual
// y_c = m(c), y_t = 0 of the "every control takes its nearest treated
// unit" cover, a standard starting point for minimum-cost edge covers.
//
// What is left: treated units that no control chose (excess 1, they push
// to the hub, whose deficit is exactly their number when the hub segments
// have spare capacity), controls without any arc or hub segment, and
// treated units whose surplus exceeded the hub -> t capacity (ratio
// bounds), which the pull phase of Solve fills.
func (g *Network) warmStart() {
	nt := g.nt
	for c := 0; c < g.nc; c++ {
		v := nt + c
		if g.excess[v] >= 0 {
			continue
		}
		best := int32(-1)
		for _, a := range g.inArc[g.inStart[c]:g.inStart[c+1]] {
			if best < 0 || g.cost[a] < g.cost[best] || (g.cost[a] == g.cost[best] && a < best) {
				best = a
			}
		}
		m, seg := infCost, -1
		if best >= 0 {
			m = Cost{0, g.cost[best]}
		}
		for i, s := range g.spec.DownC {
			if s.Cap > 0 && s.Cost.Less(m) {
				m, seg = s.Cost, i
			}
		}
		if m == infCost {
			continue // isolated and no hub segment: left to the searches
		}
		g.h[v] = m
		if seg >= 0 {
			g.downF[v][seg]++
			g.excess[g.hub]--
		} else {
			g.flow[best] = true
			g.excess[g.from[best]]--
		}
		g.excess[v]++
	}
	for t := 0; t < nt; t++ {
		for i, s := range g.spec.DownT {
			if g.excess[t] >= 0 {
				break
			}
			if s.Cost != (Cost{}) {
				continue
			}
			k := min(int64(s.Cap-g.downF[t][i]), -g.excess[t])
			if k <= 0 {
				continue
			}
			g.downF[t][i] += int32(k)
			g.excess[t] += k
			g.excess[g.hub] -= k
		}
	}
	for v := 0; v < g.hub; v++ {
		g.updateLeaf(v)
	}
	g.WarmStarts++
}
