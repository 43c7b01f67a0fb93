package assign

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"testing"
)

type reference struct {
	LSA []struct {
		Seed      uint64
		NT, NC    int
		R         uint64
		Objective float64
	}
	OneToK []struct {
		Seed           uint64
		NT, NC         int
		R              uint64
		K              int
		Caliper        float64
		MatchedTreated int `json:"matched_treated"`
		Pairs          int
		Objective      float64
	} `json:"one_to_k"`
	Full []struct {
		Seed        uint64
		NT, NC      int
		R           uint64
		MaxControls int `json:"max_controls"`
		MaxTreated  int `json:"max_treated"`
		Caliper     float64
		Uncovered   int
		Objective   float64
	}
}

func readReference(t *testing.T) reference {
	t.Helper()
	b, err := os.ReadFile("../../testdata/assign/reference.json")
	if err != nil {
		t.Fatal(err)
	}
	var ref reference
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	if len(ref.LSA) == 0 || len(ref.OneToK) == 0 || len(ref.Full) == 0 {
		t.Fatal("reference.json lacks instances")
	}
	return ref
}

func TestOptimalAgainstScipy(t *testing.T) {
	// Source: scipy.optimize.linear_sum_assignment (Debian python3-scipy
	// 1.10), values written by testdata/assign/make_reference.py.
	for _, r := range readReference(t).LSA {
		t.Run(fmt.Sprintf("seed%d_%dx%d", r.Seed, r.NT, r.NC), func(t *testing.T) {
			score, treated := lcgInstance(r.Seed, r.NT, r.NC, r.R)
			sets, cert, err := Optimal(score, treated, nil, nil, Options{Controls: 1})
			if err != nil {
				t.Fatal(err)
			}
			checkSets(t, sets, score, treated, nil, nil, 1, 0)
			if len(sets) != r.NT || !cert.Certified || cert.Objective != r.Objective {
				t.Errorf("%d sets, certified %v, objective %v; scipy objective %v", len(sets), cert.Certified, cert.Objective, r.Objective)
			}
		})
	}
}

func TestOptimalAgainstNetworkx(t *testing.T) {
	// Source: networkx.network_simplex (Debian python3-networkx 2.8) on an
	// independently written big-M formulation, make_reference.py.
	for _, r := range readReference(t).OneToK {
		t.Run(fmt.Sprintf("seed%d_k%d", r.Seed, r.K), func(t *testing.T) {
			score, treated := lcgInstance(r.Seed, r.NT, r.NC, r.R)
			sets, cert, err := Optimal(score, treated, nil, nil, Options{Controls: r.K, Caliper: r.Caliper})
			if err != nil {
				t.Fatal(err)
			}
			checkSets(t, sets, score, treated, nil, nil, r.K, r.Caliper)
			pairs := 0
			for _, s := range sets {
				pairs += len(s.Controls)
			}
			if len(sets) != r.MatchedTreated || pairs != r.Pairs || cert.Objective != r.Objective || !cert.Certified {
				t.Errorf("matched %d, pairs %d, objective %v, certified %v; networkx %d, %d, %v",
					len(sets), pairs, cert.Objective, cert.Certified, r.MatchedTreated, r.Pairs, r.Objective)
			}
		})
	}
}

func TestFullAgainstNetworkx(t *testing.T) {
	// Source: networkx.network_simplex (Debian python3-networkx 2.8),
	// full matching as a circulation with coverage bonuses, make_reference.py.
	for _, r := range readReference(t).Full {
		t.Run(fmt.Sprintf("seed%d", r.Seed), func(t *testing.T) {
			score, treated := lcgInstance(r.Seed, r.NT, r.NC, r.R)
			opt := FullOptions{Caliper: r.Caliper, MaxControls: r.MaxControls, MaxTreated: r.MaxTreated}
			groups, cert, err := Full(score, treated, nil, nil, opt)
			if err != nil {
				t.Fatal(err)
			}
			covered := checkGroups(t, groups, score, treated, nil, nil, opt)
			if r.NT+r.NC-covered != r.Uncovered || cert.Objective != r.Objective || !cert.Certified {
				t.Errorf("uncovered %d, objective %v, certified %v; networkx %d, %v",
					r.NT+r.NC-covered, cert.Objective, cert.Certified, r.Uncovered, r.Objective)
			}
		})
	}
}

// checkGroups verifies the full-matching invariants and returns the number
// of units placed.
func checkGroups(t *testing.T, groups []Group, score []float64, treated []bool, stratum []int32, eligible []bool, opt FullOptions) int {
	t.Helper()
	seen := make([]bool, len(score))
	n := 0
	var sum float64
	for i, g := range groups {
		if g.ID != i+1 {
			t.Fatalf("group %d has ID %d", i, g.ID)
		}
		nt, nc := len(g.Treated), len(g.Controls)
		if nt < 1 || nc < 1 || (nt > 1 && nc > 1) || len(g.Distances) != max(nt, nc) {
			t.Fatalf("group %d: %d treated, %d controls, %d distances", g.ID, nt, nc, len(g.Distances))
		}
		if (opt.MaxControls > 0 && nc > opt.MaxControls) || (opt.MaxTreated > 0 && nt > opt.MaxTreated) {
			t.Fatalf("group %d: %d treated, %d controls breaks bounds %+v", g.ID, nt, nc, opt)
		}
		for j, u := range append(append([]int{}, g.Treated...), g.Controls...) {
			if seen[u] {
				t.Fatalf("unit %d in two groups", u)
			}
			seen[u] = true
			n++
			if treated[u] != (j < nt) || (eligible != nil && !eligible[u]) || stratumOf(stratum, u) != stratumOf(stratum, g.Treated[0]) {
				t.Fatalf("group %d: unit %d wrong side, ineligible or across strata", g.ID, u)
			}
		}
		for j, d := range g.Distances {
			a, b := g.Treated[0], g.Controls[0]
			if nt > 1 {
				a = g.Treated[j]
			} else {
				b = g.Controls[j]
			}
			if want := math.Abs(score[a] - score[b]); d != want || (opt.Caliper > 0 && d > opt.Caliper) {
				t.Fatalf("group %d: distance %v, want %v, caliper %v", g.ID, d, want, opt.Caliper)
			}
			sum += d
		}
	}
	return n
}

// bruteFull enumerates every edge subset of the in-caliper pairs of one
// stratum, keeps those that are full matchings within the bounds (each
// edge has an end of degree 1), and returns the fewest uncovered units and
// the least distance among those.
func bruteFull(ts, cs []int, score []float64, opt FullOptions) (int, float64) {
	type edge struct {
		t, c int
		d    float64
	}
	var es []edge
	for i, a := range ts {
		for j, b := range cs {
			if d := math.Abs(score[a] - score[b]); opt.Caliper == 0 || d <= opt.Caliper {
				es = append(es, edge{i, j, d})
			}
		}
	}
	bestU, bestD := math.MaxInt, math.Inf(1)
	degT, degC := make([]int, len(ts)), make([]int, len(cs))
	for mask := 0; mask < 1<<len(es); mask++ {
		clear(degT)
		clear(degC)
		d := 0.0
		for e, x := range es {
			if mask>>e&1 == 1 {
				degT[x.t]++
				degC[x.c]++
				d += x.d
			}
		}
		ok := true
		for e, x := range es {
			if mask>>e&1 == 1 && degT[x.t] > 1 && degC[x.c] > 1 {
				ok = false
			}
		}
		for _, v := range degT {
			ok = ok && (opt.MaxControls == 0 || v <= opt.MaxControls)
		}
		for _, v := range degC {
			ok = ok && (opt.MaxTreated == 0 || v <= opt.MaxTreated)
		}
		if !ok {
			continue
		}
		u := 0
		for _, v := range append(append([]int{}, degT...), degC...) {
			if v == 0 {
				u++
			}
		}
		if u < bestU || (u == bestU && d < bestD-1e-9) {
			bestU, bestD = u, d
		}
	}
	return bestU, bestD
}

func TestFullBruteForce(t *testing.T) {
	// Exhaustive enumeration of all edge sets is the reference (common
	// practice); small score ranges give many ties.
	cases := []struct {
		nt, nc int
		r      uint64
		cal    float64
		opt    FullOptions
	}{
		{3, 5, 10, 0, FullOptions{}},
		{4, 4, 6, 2, FullOptions{}},
		{5, 3, 20, 0, FullOptions{MaxTreated: 2}},
		{3, 5, 4, 1, FullOptions{MaxControls: 2}},
		{4, 4, 5, 0, FullOptions{MaxControls: 2, MaxTreated: 2}},
		{2, 7, 9, 3, FullOptions{MaxControls: 3}},
		{4, 4, 1000, 300, FullOptions{MaxControls: 1, MaxTreated: 1}},
	}
	for i, tc := range cases {
		for rep := 0; rep < 6; rep++ {
			seed := uint64(7000 + 10*i + rep)
			score, treated := lcgInstance(seed, tc.nt, tc.nc, tc.r)
			opt := tc.opt
			opt.Caliper = tc.cal
			t.Run(fmt.Sprintf("%d_%d", i, rep), func(t *testing.T) {
				groups, cert, err := Full(score, treated, nil, nil, opt)
				if err != nil {
					t.Fatal(err)
				}
				covered := checkGroups(t, groups, score, treated, nil, nil, opt)
				ts, cs := []int{}, []int{}
				for u := range score {
					if treated[u] {
						ts = append(ts, u)
					} else {
						cs = append(cs, u)
					}
				}
				wu, wd := bruteFull(ts, cs, score, opt)
				if gu := len(score) - covered; gu != wu || math.Abs(cert.Objective-wd) > 1e-9 || !cert.Certified {
					t.Errorf("uncovered %d, objective %v, certified %v; brute force %d, %v", gu, cert.Objective, cert.Certified, wu, wd)
				}
			})
		}
	}
}

func TestInvariantsRandom(t *testing.T) {
	// Invariants stated in the API docs (common practice): no unit twice,
	// caliper, strata, eligibility, ratio bounds, certificate.
	for rep := 0; rep < 6; rep++ {
		seed := uint64(500 + rep)
		score, treated := lcgInstance(seed, 700, 1300, 5000)
		g := lcg{seed}
		stratum := make([]int32, len(score))
		eligible := make([]bool, len(score))
		for i := range score {
			stratum[i] = int32(g.next(3))
			eligible[i] = g.next(10) != 0
			// shuffle sides so treated are not all first
			if g.next(2) == 0 {
				treated[i] = !treated[i]
			}
		}
		t.Run(fmt.Sprint(rep), func(t *testing.T) {
			k := 1 + rep%3
			cal := float64(20 * (rep % 2))
			sets, cert, err := Optimal(score, treated, stratum, eligible, Options{Controls: k, Caliper: cal})
			if err != nil {
				t.Fatal(err)
			}
			checkSets(t, sets, score, treated, stratum, eligible, k, cal)
			if !cert.Certified {
				t.Errorf("1:%d not certified: %+v", k, cert)
			}
			opt := FullOptions{Caliper: cal, MaxControls: 4 * (rep % 2), MaxTreated: 3 * (rep % 3)}
			groups, fc, err := Full(score, treated, stratum, eligible, opt)
			if err != nil {
				t.Fatal(err)
			}
			checkGroups(t, groups, score, treated, stratum, eligible, opt)
			if !fc.Certified {
				t.Errorf("full not certified: %+v", fc)
			}
		})
	}
}
