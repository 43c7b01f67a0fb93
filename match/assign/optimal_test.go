package assign

import (
	"errors"
	"fmt"
	"math"
	"testing"
)

// lcg is the 64-bit linear congruential generator of Knuth's MMIX
// (a = 6364136223846793005, c = 1442695040888963407, from memory), used so
// that testdata/assign/make_reference.py regenerates exactly the same
// integer instances in Python.
type lcg struct{ x uint64 }

func (g *lcg) next(r uint64) uint64 {
	g.x = g.x*6364136223846793005 + 1442695040888963407
	return (g.x >> 33) % r
}

// lcgInstance draws nt treated scores then nc control scores, integers in
// [0, r), the layout make_reference.py uses.
func lcgInstance(seed uint64, nt, nc int, r uint64) (score []float64, treated []bool) {
	g := lcg{seed}
	for i := 0; i < nt+nc; i++ {
		score = append(score, float64(g.next(r)))
		treated = append(treated, i < nt)
	}
	return score, treated
}

// lex is the optimal-matching objective: unmatched treated, unfilled
// slots, total distance.
type lex struct {
	unmatched, unfilled int
	cost                float64
}

func (a lex) better(b lex) bool {
	if a.unmatched != b.unmatched {
		return a.unmatched < b.unmatched
	}
	if a.unfilled != b.unfilled {
		return a.unfilled < b.unfilled
	}
	return a.cost < b.cost-1e-9
}

func (a lex) equal(b lex) bool {
	return a.unmatched == b.unmatched && a.unfilled == b.unfilled && math.Abs(a.cost-b.cost) <= 1e-9*(1+math.Abs(b.cost))
}

// bruteOptimal enumerates every assignment of disjoint control subsets of
// size <= k to the treated units of one stratum (all pairs inside cal).
func bruteOptimal(ts, cs []int, score []float64, k int, cal float64) lex {
	used := make([]bool, len(cs))
	best := lex{unmatched: math.MaxInt}
	var rec func(i int, cur lex)
	rec = func(i int, cur lex) {
		if i == len(ts) {
			if cur.better(best) {
				best = cur
			}
			return
		}
		s := score[ts[i]]
		var pick func(from, got int, cur lex)
		pick = func(from, got int, cur lex) {
			done := cur
			done.unfilled += k - got
			if got == 0 {
				done.unmatched++
			}
			rec(i+1, done)
			if got == k {
				return
			}
			for j := from; j < len(cs); j++ {
				d := math.Abs(s - score[cs[j]])
				if used[j] || (cal > 0 && d > cal) {
					continue
				}
				used[j] = true
				pick(j+1, got+1, lex{cur.unmatched, cur.unfilled, cur.cost + d})
				used[j] = false
			}
		}
		pick(0, 0, cur)
	}
	rec(0, lex{})
	return best
}

// byStratum splits eligible units into per-stratum treated and control lists.
func byStratum(treated []bool, stratum []int32, eligible []bool) map[int32][2][]int {
	m := map[int32][2][]int{}
	for i := range treated {
		if eligible != nil && !eligible[i] {
			continue
		}
		s := stratumOf(stratum, i)
		e := m[s]
		if treated[i] {
			e[0] = append(e[0], i)
		} else {
			e[1] = append(e[1], i)
		}
		m[s] = e
	}
	return m
}

func TestOptimalBruteForce(t *testing.T) {
	// Exhaustive enumeration of all matchings is the reference (common
	// practice); instances with few distinct scores are full of ties.
	cases := []struct {
		nt, nc, k, n int
		r            uint64
	}{
		{8, 8, 1, 3, 5},
		{8, 8, 1, 3, 1000},
		{6, 8, 1, 20, 4},
		{7, 5, 1, 20, 6},
		{4, 8, 2, 10, 5},
		{5, 6, 2, 20, 8},
		{3, 8, 3, 10, 4},
		{4, 4, 3, 20, 3},
	}
	for _, tc := range cases {
		for rep := 0; rep < tc.n; rep++ {
			seed := uint64(1000*tc.nt + 100*tc.nc + 10*tc.k + rep)
			score, treated := lcgInstance(seed, tc.nt, tc.nc, tc.r)
			g := lcg{seed ^ 0x9e37}
			var stratum []int32
			var eligible []bool
			if rep%3 == 1 {
				stratum = make([]int32, len(score))
				for i := range stratum {
					stratum[i] = int32(g.next(2))
				}
			}
			if rep%4 == 2 {
				eligible = make([]bool, len(score))
				for i := range eligible {
					eligible[i] = g.next(6) != 0
				}
			}
			cal := 0.0
			if rep%2 == 1 {
				cal = float64(tc.r) / 4
			}
			name := fmt.Sprintf("%dx%d_k%d_r%d_%d", tc.nt, tc.nc, tc.k, tc.r, rep)
			t.Run(name, func(t *testing.T) {
				sets, cert, err := Optimal(score, treated, stratum, eligible, Options{Controls: tc.k, Caliper: cal})
				if err != nil {
					t.Fatal(err)
				}
				if !cert.Certified {
					t.Errorf("not certified: %+v", cert)
				}
				checkSets(t, sets, score, treated, stratum, eligible, tc.k, cal)
				var want, got lex
				for _, st := range byStratum(treated, stratum, eligible) {
					b := bruteOptimal(st[0], st[1], score, tc.k, cal)
					want.unmatched += b.unmatched
					want.unfilled += b.unfilled
					want.cost += b.cost
					got.unmatched += len(st[0])
					got.unfilled += tc.k * len(st[0])
				}
				for _, s := range sets {
					got.unmatched--
					got.unfilled -= len(s.Controls)
					for _, d := range s.Distances {
						got.cost += d
					}
				}
				if !got.equal(want) {
					t.Errorf("Optimal = %+v, brute force = %+v", got, want)
				}
				if math.Abs(cert.Objective-got.cost) > 1e-9 {
					t.Errorf("certificate objective %v, sets sum to %v", cert.Objective, got.cost)
				}
			})
		}
	}
}

// checkSets verifies the invariants of a 1:k matching without reuse.
func checkSets(t *testing.T, sets []Set, score []float64, treated []bool, stratum []int32, eligible []bool, k int, cal float64) {
	t.Helper()
	seen := make([]bool, len(score))
	for i, s := range sets {
		if s.ID != i+1 {
			t.Fatalf("set %d has ID %d", i, s.ID)
		}
		if len(s.Controls) < 1 || len(s.Controls) > k || len(s.Distances) != len(s.Controls) {
			t.Fatalf("set %d: %d controls, %d distances, k = %d", s.ID, len(s.Controls), len(s.Distances), k)
		}
		units := append([]int{s.Treated}, s.Controls...)
		for j, u := range units {
			if seen[u] {
				t.Fatalf("unit %d used twice", u)
			}
			seen[u] = true
			if eligible != nil && !eligible[u] {
				t.Fatalf("ineligible unit %d matched", u)
			}
			if treated[u] != (j == 0) {
				t.Fatalf("set %d: unit %d on the wrong side", s.ID, u)
			}
			if stratumOf(stratum, u) != stratumOf(stratum, s.Treated) {
				t.Fatalf("set %d crosses strata", s.ID)
			}
		}
		for j, c := range s.Controls {
			d := math.Abs(score[s.Treated] - score[c])
			if d != s.Distances[j] || (cal > 0 && d > cal) {
				t.Fatalf("set %d: distance %v (reported %v), caliper %v", s.ID, d, s.Distances[j], cal)
			}
		}
	}
}

func TestOptimalErrors(t *testing.T) {
	score := []float64{0, 1, math.NaN()}
	treated := []bool{true, false, false}
	tests := []struct {
		name     string
		eligible []bool
		opt      Options
		want     error
	}{
		{"zero controls", nil, Options{Controls: 0}, ErrOption},
		{"negative caliper", nil, Options{Controls: 1, Caliper: -1}, ErrOption},
		{"reuse", nil, Options{Controls: 1, Reuse: true}, ErrOption},
		{"NaN score", nil, Options{Controls: 1}, ErrScore},
		{"NaN excluded", []bool{true, true, false}, Options{Controls: 1}, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := Optimal(score, treated, nil, tc.eligible, tc.opt)
			if !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want %v", err, tc.want)
			}
		})
	}
}
