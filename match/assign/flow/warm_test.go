package flow

import (
	"fmt"
	"math/rand/v2"
	"testing"
)

// fullSpec is the full-matching network of package assign with ratio
// bounds mc (controls per treated) and mt (treated per control).
func fullSpec(mc, mt int32) Spec {
	return Spec{
		UpT:     [2]Seg{{Cap: 1, Cost: Cost{Tier: 1}}},
		DownT:   [2]Seg{{Cap: mc - 1}},
		UpC:     [2]Seg{{Cap: mt - 1}},
		DownC:   [2]Seg{{Cap: 1, Cost: Cost{Tier: 1}}},
		SupplyT: 1,
		SupplyC: -1,
	}
}

// randomNetwork joins treated and control points on a line by the arcs
// shorter than width (some nodes end up with no arc).
func randomNetwork(seed uint64, nt, nc int, width float64, spec Spec) *Network {
	r := rand.New(rand.NewPCG(seed, 2))
	st, sc := make([]float64, nt), make([]float64, nc)
	for i := range st {
		st[i] = float64(r.IntN(40)) // integer scores: many ties
	}
	for i := range sc {
		sc[i] = float64(r.IntN(40)) - 5
	}
	g := New(nt, nc, spec)
	for t, a := range st {
		for c, b := range sc {
			if d := max(a-b, b-a); d < width {
				g.AddArc(t, c, d)
			}
		}
	}
	return g
}

// TestWarmStartOptimality checks the reduced-cost optimality conditions of
// a pseudo-flow (Ahuja, Magnanti & Orlin 1993, section 9.7: every residual
// arc has reduced cost >= 0) right after warmStart, that supplies still
// balance, and that with unbounded ratios the hub's deficit equals the
// number of treated units no control chose (the searches that remain).
// A full Solve must then end balanced and pass CheckArcs.
func TestWarmStartOptimality(t *testing.T) {
	cases := []struct {
		nt, nc int
		width  float64
		mc, mt int32
	}{
		{20, 60, 4, 60, 20},
		{60, 20, 3, 20, 60},
		{30, 30, 2, 2, 2},
		{40, 80, 6, 1, 1},
		{50, 50, 1, 3, 50},
	}
	for i, tc := range cases {
		for seed := uint64(1); seed <= 5; seed++ {
			t.Run(fmt.Sprintf("%d_%d", i, seed), func(t *testing.T) {
				g := randomNetwork(seed+uint64(10*i), tc.nt, tc.nc, tc.width, fullSpec(tc.mc, tc.mt))
				g.index()
				g.warmStart()
				checkReduced(t, g)
				var sum int64
				chosenNone := int64(0)
				for v, e := range g.excess {
					sum += e
					if v < g.nt && e > 0 {
						chosenNone += e
					}
				}
				if sum != 0 {
					t.Fatalf("excesses sum to %d", sum)
				}
				unbounded := tc.mc == int32(tc.nc) && tc.mt == int32(tc.nt)
				if unbounded && g.excess[g.hub]+chosenNone != 0 {
					t.Errorf("hub excess %d, unchosen treated %d", g.excess[g.hub], chosenNone)
				}
				g.fresh = false
				if err := g.Solve(1e-9); err != nil {
					t.Fatal(err)
				}
				if !g.Balanced() || !g.CheckArcs(1e-9) {
					t.Errorf("after Solve: balanced %v, optimal %v", g.Balanced(), g.CheckArcs(1e-9))
				}
			})
		}
	}
}

// checkReduced fails if a residual arc has negative reduced cost.
func checkReduced(t *testing.T, g *Network) {
	t.Helper()
	neg := func(r Cost) bool { return r.Tier < 0 || (r.Tier == 0 && r.Dist < 0) }
	for a := range g.from {
		tt, c := int(g.from[a]), g.nt+int(g.to[a])
		r := Cost{0, g.cost[a]}.Add(g.h[tt]).Sub(g.h[c])
		if g.flow[a] {
			r = r.Neg()
		}
		if neg(r) {
			t.Fatalf("arc %d (%d -> %d, flow %v): reduced cost %v", a, tt, c, g.flow[a], r)
		}
	}
	for v := 0; v < g.hub; v++ {
		up, down := g.segs(v)
		for i := 0; i < 2; i++ {
			ru := up[i].Cost.Add(g.h[v]).Sub(g.h[g.hub])
			rd := down[i].Cost.Add(g.h[g.hub]).Sub(g.h[v])
			if g.downF[v][i] > down[i].Cap || g.upF[v][i] > up[i].Cap ||
				(g.upF[v][i] < up[i].Cap && neg(ru)) || (g.upF[v][i] > 0 && neg(ru.Neg())) ||
				(g.downF[v][i] < down[i].Cap && neg(rd)) || (g.downF[v][i] > 0 && neg(rd.Neg())) {
				t.Fatalf("hub segment %d of node %d: up %d/%d rc %v, down %d/%d rc %v",
					i, v, g.upF[v][i], up[i].Cap, ru, g.downF[v][i], down[i].Cap, rd)
			}
		}
	}
}
