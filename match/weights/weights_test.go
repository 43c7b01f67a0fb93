package weights

import (
	"encoding/csv"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

func near(a, b, tol float64) bool {
	if math.IsInf(a, 0) || math.IsInf(b, 0) {
		return a == b
	}
	return math.Abs(a-b) <= tol*math.Max(1, math.Max(math.Abs(a), math.Abs(b)))
}

func assertSlice(t *testing.T, name string, got, want []float64, tol float64) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%s: len %d, want %d", name, len(got), len(want))
	}
	for i := range got {
		if !near(got[i], want[i], tol) {
			t.Errorf("%s[%d] = %v, want %v", name, i, got[i], want[i])
		}
	}
}

// Hand-worked values of the published formulas (CHECKS.md rows "IPW, ATE",
// "IPW, ATT", "IPW, ATC", "overlap weights", "matching weights").
func TestSchemesHandWorked(t *testing.T) {
	ps := []float64{0.2, 0.2, 0.5, 0.5, 0.75, 0.75}
	z := []bool{true, false, true, false, true, false}
	tests := []struct {
		name string
		f    func([]float64, []bool) []float64
		want []float64
	}{
		// Rosenbaum (1987); Hirano, Imbens & Ridder (2003): Z/e + (1−Z)/(1−e).
		{"ate", ATE, []float64{5, 1.25, 2, 2, 4.0 / 3, 4}},
		// Imbens (2004): Z + (1−Z)e/(1−e).
		{"att", ATT, []float64{1, 0.25, 1, 1, 1, 3}},
		// Imbens (2004): Z(1−e)/e + (1−Z).
		{"atc", ATC, []float64{4, 1, 1, 1, 1.0 / 3, 1}},
		// Li, Morgan & Zaslavsky (2018): treated 1−e, control e.
		{"overlap", Overlap, []float64{0.8, 0.2, 0.5, 0.5, 0.25, 0.75}},
		// Li & Greene (2013): min(e,1−e)/(Ze + (1−Z)(1−e)).
		{"matching", MatchingWeights, []float64{1, 0.25, 1, 1, 1.0 / 3, 1}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			assertSlice(t, tc.name, tc.f(ps, z), tc.want, 1e-15)
			byName, err := ByName(tc.name)
			if err != nil {
				t.Fatalf("ByName(%q): %v", tc.name, err)
			}
			assertSlice(t, "ByName "+tc.name, byName(ps, z), tc.want, 1e-15)
		})
	}
}

// Matching weights equal ATT weights where e ≤ 1/2 and ATC weights where
// e ≥ 1/2 (Li & Greene 2013, Int J Biostat 9:215, section 2); every
// matching weight lies in [0, 1]. Property over random scores.
func TestMatchingWeightsProperties(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	n := 1000
	ps := make([]float64, n)
	z := make([]bool, n)
	for i := range ps {
		ps[i] = 0.001 + 0.998*r.Float64()
		z[i] = r.Float64() < ps[i]
	}
	mw, att, atc := MatchingWeights(ps, z), ATT(ps, z), ATC(ps, z)
	for i, e := range ps {
		if mw[i] < 0 || mw[i] > 1 {
			t.Errorf("unit %d: matching weight %v outside [0,1]", i, mw[i])
		}
		ref := atc[i]
		if e <= 0.5 {
			ref = att[i]
		}
		if !near(mw[i], ref, 1e-13) {
			t.Errorf("unit %d (e=%v, z=%v): matching %v, want %v", i, e, z[i], mw[i], ref)
		}
	}
}

func TestStabilize(t *testing.T) {
	tests := []struct {
		name string
		w    []float64
		z    []bool
		want []float64
	}{
		// P(Z=1) = 2/5, P(Z=0) = 3/5 (Robins, Hernán & Brumback 2000).
		{"all kept", []float64{2, 4, 1, 1, 5}, []bool{true, true, false, false, false},
			[]float64{0.8, 1.6, 0.6, 0.6, 3}},
		// A zero-weight unit leaves the analysis sample: P(Z=1) = 1/4.
		{"one restricted", []float64{2, 0, 1, 1, 5}, []bool{true, true, false, false, false},
			[]float64{0.5, 0, 0.75, 0.75, 3.75}},
		{"nothing kept", []float64{0, 0}, []bool{true, false}, []float64{0, 0}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			in := slices.Clone(tc.w)
			assertSlice(t, "Stabilize", Stabilize(tc.w, tc.z), tc.want, 1e-15)
			if !slices.Equal(in, tc.w) {
				t.Errorf("Stabilize modified its input: %v, was %v", tc.w, in)
			}
		})
	}
}

func TestRestrict(t *testing.T) {
	w := []float64{1, 2, 3}
	got := Restrict(w, []bool{true, false, true})
	assertSlice(t, "Restrict", got, []float64{1, 0, 3}, 0)
	if w[1] != 2 {
		t.Errorf("Restrict modified its input")
	}
}

func TestFromSets(t *testing.T) {
	tests := []struct {
		name     string
		n        int
		treated  []int
		controls [][]int
		want     []float64
	}{
		{"1:1 pairs", 4, []int{0, 1}, [][]int{{2}, {3}}, []float64{1, 1, 1, 1}},
		// Unit 4 serves set 0 (k=2, share 1/2) and set 1 (k=1, share 1);
		// treated 2 has no controls and stays 0; unit 5, 6 are in no set.
		{"reuse and unmatched", 7, []int{0, 1, 2}, [][]int{{3, 4}, {4}, {}},
			[]float64{1, 1, 0, 0.5, 1.5, 0, 0}},
		{"1:3", 5, []int{4}, [][]int{{0, 1, 2}}, []float64{1.0 / 3, 1.0 / 3, 1.0 / 3, 0, 1}},
		{"empty", 2, nil, nil, []float64{0, 0}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			assertSlice(t, "FromSets", FromSets(tc.n, tc.treated, tc.controls), tc.want, 1e-15)
		})
	}
}

// Property: in every random matched sample the controls carry the same
// total weight as the matched treated (the definition of set weights).
func TestFromSetsTotals(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 4))
	for rep := 0; rep < 50; rep++ {
		nt, nc := 1+r.IntN(20), 1+r.IntN(30)
		n := nt + nc
		treated := make([]int, nt)
		controls := make([][]int, nt)
		matched := 0
		for s := range treated {
			treated[s] = s
			k := r.IntN(4) // 0 = unmatched
			for j := 0; j < k; j++ {
				controls[s] = append(controls[s], nt+r.IntN(nc)) // with reuse
			}
			if k > 0 {
				matched++
			}
		}
		w := FromSets(n, treated, controls)
		var st, sc float64
		for i, wi := range w {
			if i < nt {
				st += wi
			} else {
				sc += wi
			}
		}
		if st != float64(matched) || !near(sc, st, 1e-12) {
			t.Fatalf("rep %d: treated total %v (matched %d), control total %v", rep, st, matched, sc)
		}
	}
}

func TestFromSetsPanics(t *testing.T) {
	tests := []struct {
		name     string
		treated  []int
		controls [][]int
	}{
		{"out of range", []int{0}, [][]int{{5}}},
		{"negative", []int{-1}, [][]int{{1}}},
		{"treated twice", []int{0, 0}, [][]int{{1}, {2}}},
		{"treated as control", []int{0, 1}, [][]int{{1}, {2}}},
		{"control then treated", []int{0, 2}, [][]int{{2}, {3}}},
		{"length mismatch", []int{0, 1}, [][]int{{2}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Errorf("FromSets(%v, %v) did not panic", tc.treated, tc.controls)
				}
			}()
			FromSets(4, tc.treated, tc.controls)
		})
	}
}

func TestESS(t *testing.T) {
	tests := []struct {
		name string
		w    []float64
		z    []bool
		arm  bool
		want float64
	}{
		// Kish (1965): equal weights give the count.
		{"equal", []float64{0.3, 0.3, 0.3, 0.3, 9}, []bool{true, true, true, true, false}, true, 4},
		{"other arm", []float64{0.3, 0.3, 0.3, 0.3, 9}, []bool{true, true, true, true, false}, false, 1},
		// (1+2+3)²/(1+4+9) = 36/14.
		{"uneven", []float64{1, 2, 3}, []bool{false, false, false}, false, 36.0 / 14},
		{"zero weight ignored", []float64{1, 0, 1}, []bool{true, true, true}, true, 2},
		{"empty arm", []float64{1}, []bool{true}, false, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := ESS(tc.w, tc.z, tc.arm); !near(got, tc.want, 1e-15) {
				t.Errorf("ESS = %v, want %v", got, tc.want)
			}
		})
	}
}

func TestByNameUnknown(t *testing.T) {
	if got := Names(); !slices.Equal(got, []string{"att", "ate", "atc", "overlap", "matching"}) {
		t.Errorf("Names() = %v", got)
	}
	for _, name := range []string{"", "ATT", "ipw", "overlap "} {
		if _, err := ByName(name); err == nil || !strings.Contains(err.Error(), "overlap") {
			t.Errorf("ByName(%q) error = %v, want one listing the names", name, err)
		}
	}
}

func TestChecks(t *testing.T) {
	tests := []struct {
		name   string
		ps     []float64
		wantOK bool
	}{
		{"inside", []float64{1e-12, 0.5, 1 - 1e-12}, true},
		{"zero", []float64{0.5, 0}, false},
		{"one", []float64{1}, false},
		{"nan", []float64{math.NaN()}, false},
		{"negative", []float64{-0.1}, false},
	}
	for _, tc := range tests {
		t.Run("scores "+tc.name, func(t *testing.T) {
			if err := CheckScores(tc.ps); (err == nil) != tc.wantOK {
				t.Errorf("CheckScores(%v) = %v", tc.ps, err)
			}
		})
	}
	wtests := []struct {
		name   string
		w      []float64
		wantOK bool
	}{
		{"fine", []float64{0, 1, 1e300}, true},
		{"negative", []float64{1, -1e-300}, false},
		{"inf", []float64{math.Inf(1)}, false},
		{"nan", []float64{math.NaN()}, false},
	}
	for _, tc := range wtests {
		t.Run("weights "+tc.name, func(t *testing.T) {
			if err := Check(tc.w); (err == nil) != tc.wantOK {
				t.Errorf("Check(%v) = %v", tc.w, err)
			}
		})
	}
	// IEEE arithmetic at the boundary is what CheckScores guards against.
	if w := ATE([]float64{0}, []bool{true}); !math.IsInf(w[0], 1) || Check(w) == nil {
		t.Errorf("ATE at e=0: %v, Check %v", w, Check(w))
	}
}

func TestLengthMismatchPanics(t *testing.T) {
	fs := map[string]func(){
		"ATE":      func() { ATE([]float64{0.5}, nil) },
		"Overlap":  func() { Overlap(nil, []bool{true}) },
		"Restrict": func() { Restrict([]float64{1}, nil) },
		"ESS":      func() { ESS([]float64{1}, nil, true) },
		"Stab":     func() { Stabilize([]float64{1}, nil) },
	}
	for name, f := range fs {
		t.Run(name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Errorf("%s did not panic", name)
				}
			}()
			f()
		})
	}
}

// fitLogit is a small Newton–Raphson solver for the logistic MLE; x rows
// carry the intercept. It exists only to set up the overlap-weight theorem.
func fitLogit(t *testing.T, x [][]float64, z []bool) []float64 {
	t.Helper()
	p := len(x[0])
	beta := make([]float64, p)
	for iter := 0; iter < 50; iter++ {
		grad := make([]float64, p)
		hess := make([][]float64, p)
		for j := range hess {
			hess[j] = make([]float64, p+1)
		}
		for i, xi := range x {
			e := expit(dot(beta, xi))
			zi := 0.0
			if z[i] {
				zi = 1
			}
			for j := range p {
				grad[j] += (zi - e) * xi[j]
				for k := range p {
					hess[j][k] += e * (1 - e) * xi[j] * xi[k]
				}
			}
		}
		for j := range p {
			hess[j][p] = grad[j]
		}
		step := solve(hess)
		var size float64
		for j := range beta {
			beta[j] += step[j]
			size = math.Max(size, math.Abs(step[j]))
		}
		if size < 1e-13 {
			return beta
		}
	}
	t.Fatal("logistic Newton solver did not converge")
	return nil
}

func expit(v float64) float64 { return 1 / (1 + math.Exp(-v)) }

func dot(a, b []float64) float64 {
	var s float64
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}

// solve runs Gaussian elimination with partial pivoting on an augmented
// p×(p+1) matrix.
func solve(a [][]float64) []float64 {
	p := len(a)
	for c := range p {
		piv := c
		for r := c + 1; r < p; r++ {
			if math.Abs(a[r][c]) > math.Abs(a[piv][c]) {
				piv = r
			}
		}
		a[c], a[piv] = a[piv], a[c]
		for r := c + 1; r < p; r++ {
			f := a[r][c] / a[c][c]
			for k := c; k <= p; k++ {
				a[r][k] -= f * a[c][k]
			}
		}
	}
	x := make([]float64, p)
	for r := p - 1; r >= 0; r-- {
		s := a[r][p]
		for k := r + 1; k < p; k++ {
			s -= a[r][k] * x[k]
		}
		x[r] = s / a[r][r]
	}
	return x
}

// weightedMeanGap returns, per covariate column, the difference between
// the w-weighted treated and control means.
func weightedMeanGap(x [][]float64, z []bool, w []float64, col int) float64 {
	var st, sc, mt, mc float64
	for i, xi := range x {
		if z[i] {
			st += w[i]
			mt += w[i] * xi[col]
		} else {
			sc += w[i]
			mc += w[i] * xi[col]
		}
	}
	return mt/st - mc/sc
}

// Li, Morgan & Zaslavsky (2018), JASA 113:390, Theorem 3: with a logistic
// MLE score (intercept included) the overlap-weighted means of every model
// covariate are exactly equal between arms. Seeded random data, intercept +
// 3 covariates (one binary), confounded assignment.
func TestOverlapExactBalance(t *testing.T) {
	r := rand.New(rand.NewPCG(2026, 12))
	n := 600
	x := make([][]float64, n)
	z := make([]bool, n)
	for i := range x {
		x1 := r.NormFloat64()
		x2 := 40 + 10*r.NormFloat64()
		x3 := 0.0
		if r.Float64() < 0.3 {
			x3 = 1
		}
		x[i] = []float64{1, x1, x2, x3}
		z[i] = r.Float64() < expit(-2+0.8*x1+0.04*x2-0.7*x3)
	}
	beta := fitLogit(t, x, z)
	ps := make([]float64, n)
	for i := range x {
		ps[i] = expit(dot(beta, x[i]))
	}
	ow := Overlap(ps, z)
	ate := ATE(ps, z)
	for col, name := range []string{"x1", "x2", "x3"} {
		gap := weightedMeanGap(x, z, ow, col+1)
		if math.Abs(gap) > 1e-8 {
			t.Errorf("%s: overlap-weighted mean difference %v, want 0 to 1e-8", name, gap)
		}
		// The theorem is specific to overlap weights: IPW balances only in
		// expectation, so its finite-sample gap is visibly non-zero. This
		// keeps the check above from passing vacuously.
		if g := weightedMeanGap(x, z, ate, col+1); math.Abs(g) < 1e-6 {
			t.Errorf("%s: ATE-weighted gap %v suspiciously exact", name, g)
		}
	}
}

// The same theorem on a score fitted by a reference library: statsmodels'
// Logit of PSI on const + GPA + TUCE for the Spector & Mazzeo (1980) data
// bundled with statsmodels (testdata/weights/make_spector_ps.py; the fit's
// score equations are ~1e-14, so balance holds to rounding).
func TestOverlapExactBalanceSpector(t *testing.T) {
	x, z, ps := readSpector(t)
	ow := Overlap(ps, z)
	for col, name := range []string{"GPA", "TUCE"} {
		if gap := weightedMeanGap(x, z, ow, col); math.Abs(gap) > 1e-10 {
			t.Errorf("%s: overlap-weighted mean difference %v, want 0", name, gap)
		}
	}
	// ESS of overlap weights cannot exceed the arm size (Kish 1965).
	for _, arm := range []bool{true, false} {
		var n float64
		for _, zi := range z {
			if zi == arm {
				n++
			}
		}
		if e := ESS(ow, z, arm); e <= 0 || e > n+1e-12 {
			t.Errorf("arm %v: ESS %v outside (0, %v]", arm, e, n)
		}
	}
}

func readSpector(t *testing.T) (x [][]float64, z []bool, ps []float64) {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "..", "testdata", "weights", "spector_ps.csv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	num := func(s string) float64 {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatal(err)
		}
		return v
	}
	for _, row := range rows[1:] { // GPA,TUCE,PSI,GRADE,ps
		x = append(x, []float64{num(row[0]), num(row[1])})
		z = append(z, row[2] == "1")
		ps = append(ps, num(row[4]))
	}
	if len(x) != 32 {
		t.Fatalf("spector: %d rows, want 32", len(x))
	}
	return x, z, ps
}

func BenchmarkOverlap(b *testing.B) {
	n := 1_000_000
	r := rand.New(rand.NewPCG(1, 1))
	ps := make([]float64, n)
	z := make([]bool, n)
	for i := range ps {
		ps[i] = r.Float64()
		z[i] = r.Float64() < ps[i]
	}
	b.ResetTimer()
	for b.Loop() {
		Overlap(ps, z)
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "units/s")
}
