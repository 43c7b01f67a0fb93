package survival

import (
	"math"
	"strings"
	"testing"
)

// group aggregates rows the way a warehouse query would (independent of
// the package's own grouping): by arm, time and status.
func group(d Data) []TimeGroup {
	type key struct {
		t    float64
		z, e bool
	}
	m := map[key]*TimeGroup{}
	var keys []key
	for i, t := range d.Time {
		k := key{t, d.Treated[i], d.Event[i]}
		g, ok := m[k]
		if !ok {
			g = &TimeGroup{Time: t, Treated: k.z, Event: k.e}
			m[k] = g
			keys = append(keys, k)
		}
		w := d.weight(i)
		g.N++
		g.W += w
		g.W2 += w * w
	}
	out := make([]TimeGroup, 0, len(keys))
	for _, k := range keys {
		out = append(out, *m[k])
	}
	return out
}

// Grouped inputs must reproduce the row-level results (which match R
// survival) for everything that depends only on arm × time × status sums:
// a property of the estimators (common practice), tested to 1e-10.
func TestGroupsEqualRows(t *testing.T) {
	const tol = 1e-10
	for _, ds := range survSets {
		d := loadSurv(t, ds.name)
		d.Cluster = nil
		g := group(d)
		// Split one group in two: duplicates must be merged.
		g = append(g, TimeGroup{Time: g[0].Time, Treated: g[0].Treated, Event: g[0].Event, N: 1, W: 0.25, W2: 0.0625})
		d.Time = append(d.Time, g[0].Time)
		d.Treated = append(d.Treated, g[0].Treated)
		d.Event = append(d.Event, g[0].Event)
		d.Weight = append(d.Weight, 0.25)
		rk, err := KaplanMeier(d, ds.horizons)
		if err != nil {
			t.Fatal(err)
		}
		gk, err := KaplanMeierGroups(g, ds.horizons)
		if err != nil {
			t.Fatal(err)
		}
		for a := 0; a < 2; a++ {
			if len(rk.Curves[a].Steps) != len(gk.Curves[a].Steps) {
				t.Fatalf("%s arm %d: %d steps from rows, %d from groups", ds.name, a, len(rk.Curves[a].Steps), len(gk.Curves[a].Steps))
			}
			for j, s := range rk.Curves[a].Steps {
				q := gk.Curves[a].Steps[j]
				if s.NAtRisk != q.NAtRisk || s.NEvents != q.NEvents || s.NCensored != q.NCensored ||
					relDiff(q.AtRisk, s.AtRisk, 1) > tol || relDiff(q.Surv, s.Surv, 1e-3) > tol || relDiff(q.SE, s.SE, 1e-3) > tol ||
					relDiff(q.RobustSE, s.RobustSE, 1e-3) > tol {
					t.Errorf("%s arm %d step %d: groups %+v, rows %+v", ds.name, a, j, q, s)
				}
			}
		}
		for i, h := range rk.Horizons {
			q := gk.Horizons[i]
			for _, p := range []struct {
				what string
				a, b Measure
			}{
				{"surv0", h.Surv[0], q.Surv[0]}, {"surv1", h.Surv[1], q.Surv[1]},
				{"rmst0", h.RMST[0], q.RMST[0]}, {"rmst1", h.RMST[1], q.RMST[1]},
				{"surv diff", h.SurvDiff, q.SurvDiff}, {"rmst diff", h.RMSTDiff, q.RMSTDiff}, {"risk ratio", h.RiskRatio, q.RiskRatio},
			} {
				if relDiff(p.b.Value, p.a.Value, 1e-3) > tol || relDiff(p.b.Greenwood.SE, p.a.Greenwood.SE, 0) > tol || relDiff(p.b.Robust.SE, p.a.Robust.SE, 0) > tol {
					t.Errorf("%s h=%v %s: groups %+v, rows %+v", ds.name, h.Time, p.what, p.b, p.a)
				}
			}
		}
		for _, ties := range []Ties{Efron, Breslow} {
			rc, err := Cox(d, ties)
			if err != nil {
				t.Fatal(err)
			}
			gc, err := CoxGroups(g, ties)
			if err != nil {
				t.Fatal(err)
			}
			if relDiff(gc.LogHR, rc.LogHR, rc.Model.SE) > tol || relDiff(gc.Model.SE, rc.Model.SE, 0) > tol ||
				relDiff(gc.Robust.SE, rc.Robust.SE, 0) > tol || relDiff(gc.PH.ChiSq, rc.PH.ChiSq, 0) > tol || relDiff(gc.LogLik, rc.LogLik, 0) > tol {
				t.Errorf("%s %v: groups %+v, rows %+v", ds.name, ties, gc, rc)
			}
		}
	}
}

// Grouped rates by cluster × arm reproduce the row-level HC0 and cluster
// SEs (which match statsmodels), a property of the sandwich (common
// practice).
func TestRateGroupsEqualRows(t *testing.T) {
	c := readCSV(t, "rates_cgd.csv")
	cl := floats(t, c["cl"])
	d := RateData{Count: floats(t, c["count"]), Exposure: floats(t, c["exposure"]),
		Weight: floats(t, c["w"]), Treated: make([]bool, len(cl)), Cluster: make([]int, len(cl))}
	for i, z := range floats(t, c["z"]) {
		d.Treated[i], d.Cluster[i] = z == 1, int(cl[i])
	}
	type key struct {
		c int
		z bool
	}
	m := map[key]*RateGroup{}
	var order []key
	for i := range d.Count {
		k := key{d.Cluster[i], d.Treated[i]}
		g, ok := m[k]
		if !ok {
			g = &RateGroup{Cluster: k.c, Treated: k.z}
			m[k] = g
			order = append(order, k)
		}
		w, y, e := d.Weight[i], d.Count[i], d.Exposure[i]
		g.N++
		g.WY += w * y
		g.WE += w * e
		g.W2YY += w * w * y * y
		g.W2YE += w * w * y * e
		g.W2EE += w * w * e * e
	}
	var gs []RateGroup
	for _, k := range order {
		gs = append(gs, *m[k])
	}
	rf, err := Rates(d, 1000)
	if err != nil {
		t.Fatal(err)
	}
	gf, err := RatesGroups(gs, 1000, true)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range [][2]float64{
		{gf.RateRatio, rf.RateRatio}, {gf.HC0.SE, rf.HC0.SE}, {gf.Cluster.SE, rf.Cluster.SE},
		{gf.Diff, rf.Diff}, {gf.DiffHC0.SE, rf.DiffHC0.SE}, {gf.DiffCluster.SE, rf.DiffCluster.SE}, {float64(gf.Groups), float64(rf.Groups)},
	} {
		if relDiff(p[0], p[1], 0) > 1e-10 || math.IsNaN(p[0]) {
			t.Errorf("groups %v, rows %v", p[0], p[1])
		}
	}
	nf, _ := RatesGroups(gs, 1000, false)
	if nf.Cluster != nf.HC0 || nf.Groups != 0 {
		t.Errorf("unclustered groups: cluster %+v, HC0 %+v, groups %d", nf.Cluster, nf.HC0, nf.Groups)
	}
}

// Malformed groups are errors that count them (issue 14, bad input).
func TestGroupsBadInput(t *testing.T) {
	if _, err := KaplanMeierGroups([]TimeGroup{{Time: 1, N: 0, W: 1, W2: 1}, {Time: 2, Treated: true, Event: true, N: 1, W: -1, W2: 1}}, nil); err == nil || !strings.Contains(err.Error(), "2 groups have") {
		t.Errorf("KaplanMeierGroups: %v", err)
	}
	if _, err := CoxGroups([]TimeGroup{{Time: -1, N: 3, W: 3, W2: 3}, {Time: 2, Treated: true, Event: true, N: 1, W: 1, W2: 1}}, Efron); err == nil || !strings.Contains(err.Error(), "3 units have a follow-up time") {
		t.Errorf("CoxGroups: %v", err)
	}
	if _, err := RatesGroups([]RateGroup{{N: 0, WY: 1, WE: 1}, {Treated: true, N: 1, WY: math.NaN(), WE: 1}}, 1000, false); err == nil || !strings.Contains(err.Error(), "2 groups have") {
		t.Errorf("RatesGroups: %v", err)
	}
}
