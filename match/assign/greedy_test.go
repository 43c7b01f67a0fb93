package assign

import (
	"cmp"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

const (
	T = true
	C = false
)

func TestParseOrder(t *testing.T) {
	tests := []struct {
		in      string
		want    Order
		wantErr bool
	}{
		{"high-score-first", HighFirst, false},
		{"low-score-first", LowFirst, false},
		{"random", Random, false},
		{"unit", UnitOrder, false},
		// No guessing at near misses (STYLE.md: don't correct the user's input).
		{"High-Score-First", 0, true},
		{" input", 0, true},
		{"high", 0, true},
		{"", 0, true},
	}
	for _, tc := range tests {
		t.Run(tc.in, func(t *testing.T) {
			got, err := ParseOrder(tc.in)
			if tc.wantErr {
				if !errors.Is(err, ErrOption) {
					t.Fatalf("ParseOrder(%q) error = %v, want ErrOption", tc.in, err)
				}
				return
			}
			if err != nil || got != tc.want {
				t.Fatalf("ParseOrder(%q) = %v, %v; want %v", tc.in, got, err, tc.want)
			}
			if got.String() != tc.in {
				t.Fatalf("%v.String() = %q, want %q", got, got.String(), tc.in)
			}
		})
	}
}

// TestGreedyHandWorked checks small cases whose answers were worked out by
// hand from the conventions in doc.go. Scores are multiples of 1/8 so every
// distance, and every distance-equals-caliper edge, is exact in float64.
func TestGreedyHandWorked(t *testing.T) {
	type want struct {
		treated  int
		controls []int
		dist     []float64
	}
	tests := []struct {
		name     string
		score    []float64
		treated  []bool
		stratum  []int32
		eligible []bool
		opt      Options
		want     []want // in ID order
	}{
		{
			// Unit 1 (2.0) goes first and takes 1.625 (d .375) over 0 (d 2);
			// unit 0 is left with 0 (d 1).
			name:    "high-first takes the contested control",
			score:   []float64{1, 2, 1.625, 0},
			treated: []bool{T, T, C, C},
			opt:     Options{Controls: 1, Order: HighFirst},
			want:    []want{{1, []int{2}, []float64{.375}}, {0, []int{3}, []float64{1}}},
		},
		{
			// Unit 0 (1.0) goes first: 1.625 (d .625) beats 0 (d 1).
			name:    "low-first",
			score:   []float64{1, 2, 1.625, 0},
			treated: []bool{T, T, C, C},
			opt:     Options{Controls: 1, Order: LowFirst},
			want:    []want{{0, []int{2}, []float64{.625}}, {1, []int{3}, []float64{2}}},
		},
		{
			// Unit order processes unit 0 (score 2) before unit 1 (score 1),
			// which low-first would reverse.
			name:    "unit order",
			score:   []float64{2, 1, 1.625, 0},
			treated: []bool{T, T, C, C},
			opt:     Options{Controls: 1, Order: UnitOrder},
			want:    []want{{0, []int{2}, []float64{.375}}, {1, []int{3}, []float64{1}}},
		},
		{
			name:    "unit order vs low-first on the same data",
			score:   []float64{2, 1, 1.625, 0},
			treated: []bool{T, T, C, C},
			opt:     Options{Controls: 1, Order: LowFirst},
			want:    []want{{1, []int{2}, []float64{.625}}, {0, []int{3}, []float64{2}}},
		},
		{
			// Equal treated scores: the lower index chooses first in both
			// score orders.
			name:    "treated score tie, high-first",
			score:   []float64{1, 1, 1.25, .5},
			treated: []bool{T, T, C, C},
			opt:     Options{Controls: 1, Order: HighFirst},
			want:    []want{{0, []int{2}, []float64{.25}}, {1, []int{3}, []float64{.5}}},
		},
		{
			name:    "treated score tie, low-first",
			score:   []float64{1, 1, 1.25, .5},
			treated: []bool{T, T, C, C},
			opt:     Options{Controls: 1, Order: LowFirst},
			want:    []want{{0, []int{2}, []float64{.25}}, {1, []int{3}, []float64{.5}}},
		},
		{
			// Controls at 1.5 (index 1) and 0.5 (index 2), both d .5: lower
			// index wins, here the one above.
			name:    "distance tie across sides, upper has lower index",
			score:   []float64{1, 1.5, .5},
			treated: []bool{T, C, C},
			opt:     Options{Controls: 1},
			want:    []want{{0, []int{1}, []float64{.5}}},
		},
		{
			name:    "distance tie across sides, lower has lower index",
			score:   []float64{1, .5, 1.5},
			treated: []bool{T, C, C},
			opt:     Options{Controls: 1},
			want:    []want{{0, []int{1}, []float64{.5}}},
		},
		{
			// Three controls at 0.5 below the treated unit: indexes 0, 2, 3
			// in that order.
			name:    "equal control scores below, k=2",
			score:   []float64{.5, 1, .5, .5},
			treated: []bool{C, T, C, C},
			opt:     Options{Controls: 2},
			want:    []want{{1, []int{0, 2}, []float64{.5, .5}}},
		},
		{
			name:    "equal control scores above",
			score:   []float64{0, .5, .5, .5},
			treated: []bool{T, C, C, C},
			opt:     Options{Controls: 1},
			want:    []want{{0, []int{1}, []float64{.5}}},
		},
		{
			name:    "control with the treated unit's own score",
			score:   []float64{.75, .75, .5},
			treated: []bool{C, T, C},
			opt:     Options{Controls: 2},
			want:    []want{{1, []int{0, 2}, []float64{0, .25}}},
		},
		{
			name:    "distance equal to caliper is inside",
			score:   []float64{1, 1.25},
			treated: []bool{T, C},
			opt:     Options{Controls: 1, Caliper: .25},
			want:    []want{{0, []int{1}, []float64{.25}}},
		},
		{
			name:    "distance equal to caliper is inside, below",
			score:   []float64{1, .75},
			treated: []bool{T, C},
			opt:     Options{Controls: 1, Caliper: .25},
			want:    []want{{0, []int{1}, []float64{.25}}},
		},
		{
			name:    "distance just past caliper leaves the unit unmatched",
			score:   []float64{1, 1.25},
			treated: []bool{T, C},
			opt:     Options{Controls: 1, Caliper: .125},
			want:    nil,
		},
		{
			name:    "caliper with reuse",
			score:   []float64{1, 1.25, 2},
			treated: []bool{T, C, T},
			opt:     Options{Controls: 1, Caliper: .25, Reuse: true},
			want:    []want{{0, []int{1}, []float64{.25}}},
		},
		{
			// k=3 but only two controls within .25: a partial set, nearest first.
			name:    "partial set under a caliper",
			score:   []float64{1, 1.25, .5, 1.125},
			treated: []bool{T, C, C, C},
			opt:     Options{Controls: 3, Caliper: .25},
			want:    []want{{0, []int{3, 1}, []float64{.125, .25}}},
		},
		{
			name:    "strata: nearer control in another stratum is ignored",
			score:   []float64{1, 1, 2, 5},
			treated: []bool{T, C, C, T},
			stratum: []int32{1, 2, 1, 3},
			opt:     Options{Controls: 1},
			want:    []want{{0, []int{2}, []float64{1}}},
		},
		{
			name:     "ineligible units never match",
			score:    []float64{1, 1, 3, 3},
			treated:  []bool{T, C, C, T},
			eligible: []bool{true, false, true, false},
			opt:      Options{Controls: 1},
			want:     []want{{0, []int{2}, []float64{2}}},
		},
		{
			name:    "without reuse the second treated unit finds nothing",
			score:   []float64{1, 1, 1},
			treated: []bool{T, T, C},
			opt:     Options{Controls: 1},
			want:    []want{{0, []int{2}, []float64{0}}},
		},
		{
			name:    "with reuse both treated units take the same control",
			score:   []float64{1, 1, 1},
			treated: []bool{T, T, C},
			opt:     Options{Controls: 1, Reuse: true},
			want:    []want{{0, []int{2}, []float64{0}}, {1, []int{2}, []float64{0}}},
		},
		{
			// Per treated, k nearest in turn: unit 1 (high-first) takes both
			// of its nearest controls before unit 0 chooses.
			name:    "k=2 in turn without reuse",
			score:   []float64{0, 1, .25, .75, -1, 2},
			treated: []bool{T, T, C, C, C, C},
			opt:     Options{Controls: 2},
			want:    []want{{1, []int{3, 2}, []float64{.25, .75}}, {0, []int{4, 5}, []float64{1, 2}}},
		},
		{
			name:    "k=2 with reuse",
			score:   []float64{0, 1, .25, .75, -1, 2},
			treated: []bool{T, T, C, C, C, C},
			opt:     Options{Controls: 2, Reuse: true},
			want:    []want{{1, []int{3, 2}, []float64{.25, .75}}, {0, []int{2, 3}, []float64{.25, .75}}},
		},
		{
			// Reuse with a run of equal scores longer than k on each side:
			// 0.5 at indexes 5, 1, 3 and 1.5 at 2, 4; all d .5; the three
			// lowest indexes are 1, 2, 3.
			name:    "k=3 with reuse and tied runs on both sides",
			score:   []float64{1, .5, 1.5, .5, 1.5, .5},
			treated: []bool{T, C, C, C, C, C},
			opt:     Options{Controls: 3, Reuse: true},
			want:    []want{{0, []int{1, 2, 3}, []float64{.5, .5, .5}}},
		},
		{
			name:    "no controls",
			score:   []float64{1, 2},
			treated: []bool{T, T},
			opt:     Options{Controls: 1},
			want:    nil,
		},
		{
			name:    "no units",
			score:   []float64{},
			treated: []bool{},
			opt:     Options{Controls: 1},
			want:    nil,
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := Greedy(tc.score, tc.treated, tc.stratum, tc.eligible, tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			if len(got) != len(tc.want) {
				t.Fatalf("got %d sets %v, want %d %v", len(got), got, len(tc.want), tc.want)
			}
			for i, w := range tc.want {
				g := got[i]
				if g.ID != i+1 || g.Treated != w.treated || !slices.Equal(g.Controls, w.controls) || !slices.Equal(g.Distances, w.dist) {
					t.Errorf("set %d = %+v, want ID %d %+v", i, g, i+1, w)
				}
			}
		})
	}
}

func TestGreedyErrors(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	ok := Options{Controls: 1}
	tests := []struct {
		name     string
		score    []float64
		eligible []bool
		opt      Options
		want     error // nil = no error
	}{
		{"zero controls", []float64{1, 2}, nil, Options{Controls: 0}, ErrOption},
		{"negative controls", []float64{1, 2}, nil, Options{Controls: -1}, ErrOption},
		{"negative caliper", []float64{1, 2}, nil, Options{Controls: 1, Caliper: -.1}, ErrOption},
		{"NaN caliper", []float64{1, 2}, nil, Options{Controls: 1, Caliper: nan}, ErrOption},
		{"unknown order", []float64{1, 2}, nil, Options{Controls: 1, Order: 7}, ErrOption},
		{"negative order", []float64{1, 2}, nil, Options{Controls: 1, Order: -1}, ErrOption},
		{"NaN score", []float64{1, nan}, nil, ok, ErrScore},
		{"infinite score", []float64{-inf, 2}, nil, ok, ErrScore},
		{"NaN score of an ineligible unit is never read", []float64{1, nan}, []bool{true, false}, ok, nil},
		{"infinite caliper acts as none", []float64{1, 2}, nil, Options{Controls: 1, Caliper: inf}, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Greedy(tc.score, []bool{T, C}, nil, tc.eligible, tc.opt)
			if tc.want == nil {
				if err != nil {
					t.Fatalf("unexpected error %v", err)
				}
				return
			}
			if !errors.Is(err, tc.want) {
				t.Fatalf("error = %v, want %v", err, tc.want)
			}
		})
	}
}

func TestGreedyPanicsOnLengthMismatch(t *testing.T) {
	score := []float64{1, 2, 3}
	tests := []struct {
		name     string
		treated  []bool
		stratum  []int32
		eligible []bool
	}{
		{"treated", []bool{T, C}, nil, nil},
		{"stratum", []bool{T, C, C}, []int32{0}, nil},
		{"eligible", []bool{T, C, C}, nil, []bool{true}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Fatal("no panic")
				}
			}()
			_, _ = Greedy(score, tc.treated, tc.stratum, tc.eligible, Options{Controls: 1})
		})
	}
}

// instance is one random matching problem.
type instance struct {
	score    []float64
	treated  []bool
	stratum  []int32
	eligible []bool
	opt      Options
}

func (in instance) String() string {
	return fmt.Sprintf("score=%v treated=%v stratum=%v eligible=%v opt=%+v", in.score, in.treated, in.stratum, in.eligible, in.opt)
}

// randomInstance draws a small problem designed to hit ties: scores are
// rounded to a coarse grid in most modes, and one mode places controls so
// close together, far from the treated scores, that float64 rounding gives
// different control scores the same computed distance.
func randomInstance(r *rand.Rand, opt Options) instance {
	n := 1 + r.IntN(40)
	in := instance{score: make([]float64, n), treated: make([]bool, n), opt: opt}
	pT := 0.1 + 0.6*r.Float64()
	mode := r.IntN(4)
	for i := range n {
		in.treated[i] = r.Float64() < pT
		z := r.NormFloat64()
		switch mode {
		case 0: // continuous
			in.score[i] = z
		case 1: // multiples of 1/8: exact distances, many ties
			in.score[i] = math.Round(z*8) / 8
		case 2: // integers: long runs of equal scores
			in.score[i] = math.Round(z)
		case 3: // rounding ties in s - v between distinct control scores
			if in.treated[i] {
				in.score[i] = 1000 + float64(r.IntN(3))
			} else {
				in.score[i] = float64(r.IntN(3)) + float64(r.IntN(6))*1e-14
			}
		}
	}
	if mode == 3 && r.IntN(2) == 0 {
		// Mirror the scores so the rounding ties fall on the upper side.
		for i := range in.score {
			in.score[i] = -in.score[i]
		}
	}
	if r.IntN(2) == 0 {
		in.stratum = make([]int32, n)
		for i := range in.stratum {
			in.stratum[i] = int32(r.IntN(3)) - 1
		}
	}
	if r.IntN(2) == 0 {
		in.eligible = make([]bool, n)
		for i := range in.eligible {
			in.eligible[i] = r.Float64() < 0.8
		}
	}
	switch r.IntN(3) {
	case 0:
		in.opt.Caliper = 0
	case 1: // on the 1/8 grid so distance == caliper happens in mode 1
		in.opt.Caliper = float64(1+r.IntN(8)) / 8
	case 2:
		in.opt.Caliper = r.Float64()
	}
	if mode == 3 && in.opt.Caliper > 0 {
		in.opt.Caliper += 998
	}
	return in
}

func (in instance) ok(i int) bool         { return in.eligible == nil || in.eligible[i] }
func (in instance) stratumOf(i int) int32 { return stratumOf(in.stratum, i) }

// compatible says whether control c may ever serve treated unit t.
func (in instance) compatible(t, c int) bool {
	return !in.treated[c] && in.ok(c) && in.stratumOf(c) == in.stratumOf(t) &&
		(in.opt.Caliper == 0 || math.Abs(in.score[t]-in.score[c]) <= in.opt.Caliper)
}

// naiveGreedy is the brute-force reference: for each treated unit in the
// given sequence, scan every control k times and take the one with the
// smallest (distance, index) that is compatible and, without reuse, unused.
// O(n_t × n_c × k).
func naiveGreedy(in instance, sequence []int) []Set {
	used := make([]bool, len(in.score))
	var sets []Set
	for _, t := range sequence {
		var ctl []int
		var dist []float64
		for len(ctl) < in.opt.Controls {
			best, bestD := -1, 0.0
			for c := range in.score {
				if !in.compatible(t, c) || (!in.opt.Reuse && used[c]) || slices.Contains(ctl, c) {
					continue
				}
				d := math.Abs(in.score[t] - in.score[c])
				if best < 0 || d < bestD || (d == bestD && c < best) {
					best, bestD = c, d
				}
			}
			if best < 0 {
				break
			}
			ctl = append(ctl, best)
			dist = append(dist, bestD)
			if !in.opt.Reuse {
				used[best] = true
			}
		}
		if len(ctl) > 0 {
			sets = append(sets, Set{ID: len(sets) + 1, Treated: t, Controls: ctl, Distances: dist})
		}
	}
	return sets
}

// naiveSequence is the processing order written out independently of the
// package: eligible treated units sorted by the documented keys.
func naiveSequence(in instance) []int {
	var seq []int
	for i := range in.score {
		if in.treated[i] && in.ok(i) {
			seq = append(seq, i)
		}
	}
	switch in.opt.Order {
	case HighFirst:
		slices.SortStableFunc(seq, func(a, b int) int { return cmp.Compare(in.score[b], in.score[a]) })
	case LowFirst:
		slices.SortStableFunc(seq, func(a, b int) int { return cmp.Compare(in.score[a], in.score[b]) })
	}
	return seq
}

// replaySequence rebuilds a processing order from the output: matched units
// in set order, then the unmatched ones. Placing the unmatched last is
// harmless because a unit that found no control takes none, and controls
// only ever get used up, so it would find none later either.
func replaySequence(in instance, sets []Set) []int {
	var seq []int
	seen := map[int]bool{}
	for _, s := range sets {
		seq = append(seq, s.Treated)
		seen[s.Treated] = true
	}
	for i := range in.score {
		if in.treated[i] && in.ok(i) && !seen[i] {
			seq = append(seq, i)
		}
	}
	return seq
}

func equalSets(a, b []Set) bool {
	return slices.EqualFunc(a, b, func(x, y Set) bool {
		return x.ID == y.ID && x.Treated == y.Treated &&
			slices.Equal(x.Controls, y.Controls) && slices.Equal(x.Distances, y.Distances)
	})
}

// checkInvariants asserts what must hold for any output of Greedy.
func checkInvariants(t *testing.T, in instance, sets []Set) {
	t.Helper()
	k := in.opt.Controls
	seenT := map[int]bool{}
	useCount := map[int]int{}
	for i, s := range sets {
		if s.ID != i+1 {
			t.Fatalf("set %d has ID %d; IDs must be 1..n in formation order\n%v", i, s.ID, in)
		}
		if !in.treated[s.Treated] || !in.ok(s.Treated) {
			t.Fatalf("set %d: unit %d is not an eligible treated unit\n%v", s.ID, s.Treated, in)
		}
		if seenT[s.Treated] {
			t.Fatalf("treated unit %d in two sets\n%v", s.Treated, in)
		}
		seenT[s.Treated] = true
		if len(s.Controls) < 1 || len(s.Controls) > k || len(s.Distances) != len(s.Controls) {
			t.Fatalf("set %d has %d controls, %d distances; want 1..%d\n%v", s.ID, len(s.Controls), len(s.Distances), k, in)
		}
		for j, c := range s.Controls {
			// compatible covers: a control, eligible, same stratum, inside caliper.
			if !in.compatible(s.Treated, c) {
				t.Fatalf("set %d: control %d incompatible with treated %d\n%v", s.ID, c, s.Treated, in)
			}
			if d := math.Abs(in.score[s.Treated] - in.score[c]); s.Distances[j] != d {
				t.Fatalf("set %d: distance %v, want |%v - %v| = %v", s.ID, s.Distances[j], in.score[s.Treated], in.score[c], d)
			}
			if j > 0 && s.Distances[j] < s.Distances[j-1] {
				t.Fatalf("set %d: controls not nearest first: %v", s.ID, s.Distances)
			}
			if slices.Contains(s.Controls[:j], c) {
				t.Fatalf("set %d: control %d twice", s.ID, c)
			}
			useCount[c]++
		}
	}
	if in.opt.Reuse {
		return
	}
	for c, n := range useCount {
		if n > 1 {
			t.Fatalf("control %d used %d times without reuse\n%v", c, n, in)
		}
	}
	// Greedy without reuse leaves no unmatched (or partially matched)
	// treated unit with an unused compatible control (CHECKS.md: property
	// of the algorithm, common practice).
	size := map[int]int{}
	for _, s := range sets {
		size[s.Treated] = len(s.Controls)
	}
	for tr := range in.score {
		if !in.treated[tr] || !in.ok(tr) || size[tr] == k {
			continue
		}
		for c := range in.score {
			if in.compatible(tr, c) && useCount[c] == 0 {
				t.Fatalf("treated %d has %d < %d controls but control %d is unused and compatible\n%v", tr, size[tr], k, c, in)
			}
		}
	}
}

// TestGreedyProperties runs every order × reuse × k in 1..3 on 100 random
// instances each (2,400 in all). Each output must satisfy the invariants
// and equal the brute-force reference naiveGreedy exactly, tie-breaking
// included. For fixed orders the reference uses its own sort of the treated
// units; for the random order it replays the order the sets record. The
// brief's required case (k=1, no reuse, input order) is one of the 24
// configurations.
func TestGreedyProperties(t *testing.T) {
	r := rand.New(rand.NewPCG(20261201, 1))
	const perConfig = 100
	configs := 0
	for _, order := range []Order{HighFirst, LowFirst, Random, UnitOrder} {
		for _, reuse := range []bool{false, true} {
			for k := 1; k <= 3; k++ {
				configs++
				for range perConfig {
					in := randomInstance(r, Options{Controls: k, Reuse: reuse, Order: order, Seed: r.Uint64()})
					got, err := Greedy(in.score, in.treated, in.stratum, in.eligible, in.opt)
					if err != nil {
						t.Fatalf("%v\n%v", err, in)
					}
					checkInvariants(t, in, got)
					seq := naiveSequence(in)
					if order == Random {
						seq = replaySequence(in, got)
					}
					if want := naiveGreedy(in, seq); !equalSets(got, want) {
						t.Fatalf("%v\ngot  %v\nwant %v", in, got, want)
					}
				}
			}
		}
	}
	if configs*perConfig < 1000 {
		t.Fatalf("only %d instances", configs*perConfig)
	}
}

// TestGreedyReuseKNearest: with reuse and no caliper every eligible treated
// unit gets min(k, controls in its stratum) controls, and they are its k
// nearest by (distance, index), found by sorting all candidates (brute
// force). With reuse the processing order cannot matter, which is checked
// too.
func TestGreedyReuseKNearest(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 7))
	for range 300 {
		k := 1 + r.IntN(4)
		in := randomInstance(r, Options{Controls: k, Reuse: true})
		in.opt.Caliper = 0
		got, err := Greedy(in.score, in.treated, in.stratum, in.eligible, in.opt)
		if err != nil {
			t.Fatal(err)
		}
		byTreated := map[int]Set{}
		for _, s := range got {
			byTreated[s.Treated] = s
		}
		for tr := range in.score {
			if !in.treated[tr] || !in.ok(tr) {
				continue
			}
			var cands []int
			for c := range in.score {
				if in.compatible(tr, c) {
					cands = append(cands, c)
				}
			}
			slices.SortFunc(cands, func(a, b int) int {
				da, db := math.Abs(in.score[tr]-in.score[a]), math.Abs(in.score[tr]-in.score[b])
				if c := cmp.Compare(da, db); c != 0 {
					return c
				}
				return cmp.Compare(a, b)
			})
			want := cands[:min(k, len(cands))]
			s, ok := byTreated[tr]
			if len(want) == 0 {
				if ok {
					t.Fatalf("treated %d has no control in its stratum but got %v\n%v", tr, s, in)
				}
				continue
			}
			if !slices.Equal(s.Controls, want) {
				t.Fatalf("treated %d: controls %v, want %v\n%v", tr, s.Controls, want, in)
			}
		}
		for _, o := range []Order{HighFirst, LowFirst, Random} {
			opt := in.opt
			opt.Order = o
			other, err := Greedy(in.score, in.treated, in.stratum, in.eligible, opt)
			if err != nil {
				t.Fatal(err)
			}
			if len(other) != len(got) {
				t.Fatalf("order %v: %d sets, input order %d", o, len(other), len(got))
			}
			for _, s := range other {
				if !slices.Equal(s.Controls, byTreated[s.Treated].Controls) {
					t.Fatalf("order %v changed treated %d's controls with reuse", o, s.Treated)
				}
			}
		}
	}
}

// TestGreedyRandomOrder: the random order is reproducible from the seed,
// is neither input nor score order, and changes with the seed.
func TestGreedyRandomOrder(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	n := 400
	score, treated := make([]float64, n), make([]bool, n)
	for i := range n {
		score[i] = r.NormFloat64()
		treated[i] = i%2 == 0
	}
	run := func(seed uint64) []int {
		t.Helper()
		sets, err := Greedy(score, treated, nil, nil, Options{Controls: 1, Reuse: true, Order: Random, Seed: seed})
		if err != nil {
			t.Fatal(err)
		}
		var seq []int
		for _, s := range sets {
			seq = append(seq, s.Treated)
		}
		return seq
	}
	a, b, c := run(1), run(1), run(2)
	if len(a) != n/2 {
		t.Fatalf("%d sets, want %d", len(a), n/2)
	}
	if !slices.Equal(a, b) {
		t.Fatal("same seed, different order")
	}
	if slices.Equal(a, c) {
		t.Fatal("seeds 1 and 2 gave the same order")
	}
	if slices.IsSorted(a) {
		t.Fatal("random order equals input order")
	}
	if slices.IsSortedFunc(a, func(x, y int) int { return cmp.Compare(score[x], score[y]) }) ||
		slices.IsSortedFunc(a, func(x, y int) int { return cmp.Compare(score[y], score[x]) }) {
		t.Fatal("random order equals a score order")
	}
}

// TestGreedyDeterministic: repeated calls give identical output, and the
// output does not alias between sets (appending to one set's slices must
// not change another).
func TestGreedyDeterministic(t *testing.T) {
	r := rand.New(rand.NewPCG(11, 12))
	for range 50 {
		in := randomInstance(r, Options{Controls: 1 + r.IntN(3), Reuse: r.IntN(2) == 0, Order: Order(r.IntN(4)), Seed: r.Uint64()})
		a, err := Greedy(in.score, in.treated, in.stratum, in.eligible, in.opt)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := Greedy(in.score, in.treated, in.stratum, in.eligible, in.opt)
		if !equalSets(a, b) {
			t.Fatalf("two runs differ\n%v\n%v\n%v", in, a, b)
		}
		if len(a) > 1 {
			before := slices.Clone(a[1].Controls)
			_ = append(a[0].Controls, -1)
			if !slices.Equal(a[1].Controls, before) {
				t.Fatal("sets share backing storage")
			}
		}
	}
}

// benchData draws 100,000 treated and 900,000 controls with logit scores
// N(0.5, 1) and N(0, 1) and returns the caliper 0.2 × pooled SD of the
// logit, sqrt((s1² + s0²)/2) (Austin 2011, Pharm Stat 10:150).
func benchData() ([]float64, []bool, float64) {
	const nT, nC = 100_000, 900_000
	r := rand.New(rand.NewPCG(1, 2))
	score, treated := make([]float64, nT+nC), make([]bool, nT+nC)
	var sum, sumSq [2]float64
	for i := range score {
		g := 0
		if i%10 == 0 {
			g = 1
			treated[i] = true
			score[i] = 0.5 + r.NormFloat64()
		} else {
			score[i] = r.NormFloat64()
		}
		sum[g] += score[i]
		sumSq[g] += score[i] * score[i]
	}
	variance := func(g, n int) float64 {
		m := sum[g] / float64(n)
		return (sumSq[g] - float64(n)*m*m) / float64(n-1)
	}
	sd := math.Sqrt((variance(1, nT) + variance(0, nC)) / 2)
	return score, treated, 0.2 * sd
}

func benchmarkGreedy(b *testing.B, reuse bool) {
	score, treated, caliper := benchData()
	opt := Options{Controls: 1, Reuse: reuse, Caliper: caliper, Order: HighFirst}
	var sets []Set
	for b.Loop() {
		var err error
		sets, err = Greedy(score, treated, nil, nil, opt)
		if err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*len(score)), "ns/unit")
	b.ReportMetric(float64(len(sets))/100_000, "matched-frac")
}

// BenchmarkGreedy: 100,000 treated × 900,000 controls, k=1, caliper 0.2 SD
// of the logit, high-score-first.
func BenchmarkGreedy(b *testing.B) {
	b.Run("no-reuse", func(b *testing.B) { benchmarkGreedy(b, false) })
	b.Run("reuse", func(b *testing.B) { benchmarkGreedy(b, true) })
}
