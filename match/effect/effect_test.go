package effect

import (
	"encoding/csv"
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

func near(a, b, tol float64) bool {
	return math.Abs(a-b) <= tol*math.Max(1e-300, math.Max(math.Abs(a), math.Abs(b)))
}

// Hand-worked values of the closed form (White 1980 HC0 for the saturated
// WLS design; derivation in Difference's doc comment).
func TestDifferenceHandWorked(t *testing.T) {
	nan := math.NaN()
	y := []float64{3, 5, 1, 2, 6}
	z := []bool{true, true, false, false, false}
	tests := []struct {
		name     string
		y        []float64
		z        []bool
		w        []float64
		est, vr  float64
		nt, nc   int
		nmissing int
	}{
		// Means 4 and 3; Var = (1+1)/2² + (4+1+9)/3² = 0.5 + 14/9.
		{"unweighted", y, z, nil, 1, 0.5 + 14.0/9, 2, 3, 0},
		// Means 18/4 = 4.5 and 15/4 = 3.75. Treated: (2.25 + 9·0.25)/16;
		// control: (7.5625 + 3.0625 + 4·5.0625)/16.
		{"weighted", y, z, []float64{1, 3, 1, 1, 2}, 0.75, 4.5/16 + 30.875/16, 2, 3, 0},
		// Doubling every weight changes nothing.
		{"scaled", y, z, []float64{2, 6, 2, 2, 4}, 0.75, 4.5/16 + 30.875/16, 2, 3, 0},
		// A zero-weight row and a zero-weight NaN are ignored; a NaN of
		// positive weight is counted as missing.
		{"zero and missing", append(y, 100, nan, nan), append(z, true, false, true), []float64{1, 1, 1, 1, 1, 0, 0, 4},
			1, 0.5 + 14.0/9, 2, 3, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			e, err := Difference(tc.y, tc.z, tc.w)
			if err != nil {
				t.Fatal(err)
			}
			se := math.Sqrt(tc.vr)
			if !near(e.Estimate, tc.est, 1e-14) || !near(e.SE, se, 1e-14) {
				t.Errorf("estimate %v SE %v, want %v %v", e.Estimate, e.SE, tc.est, se)
			}
			if e.NTreated != tc.nt || e.NControl != tc.nc || e.NMissing != tc.nmissing {
				t.Errorf("counts %d/%d/%d, want %d/%d/%d", e.NTreated, e.NControl, e.NMissing, tc.nt, tc.nc, tc.nmissing)
			}
			// Normal interval and two-sided p (1.959963984540054 is the
			// 0.975 normal quantile, from memory; Φ via erfc).
			if !near(e.CILow, tc.est-1.959963984540054*se, 1e-14) || !near(e.CIHigh, tc.est+1.959963984540054*se, 1e-14) {
				t.Errorf("CI [%v, %v]", e.CILow, e.CIHigh)
			}
			if !near(e.Z, tc.est/se, 1e-14) || !near(e.P, 2*(1-normalCDF(math.Abs(tc.est/se))), 1e-12) {
				t.Errorf("Z %v P %v", e.Z, e.P)
			}
			if e.Method != MethodHC0 {
				t.Errorf("Method %q", e.Method)
			}
		})
	}
}

func normalCDF(x float64) float64 { return 0.5 * (1 + math.Erf(x/math.Sqrt2)) }

// Known normal tail: a z of 1.959963984540054 has two-sided p 0.05.
func TestPValueAtCritical(t *testing.T) {
	e := finish(arms{meanT: ZCrit, nT: 1, nC: 1}, 1, "")
	if !near(e.P, 0.05, 1e-12) || !near(e.CILow, 0, 1e-12) {
		t.Errorf("P %v CILow %v, want 0.05 and 0", e.P, e.CILow)
	}
}

// sandwich computes the z-entry of the general WLS sandwich
// B⁻¹ M B⁻¹ with B = Σ w x x' and M = Σ_g u_g u_g', u_g = Σ_{i∈g} w r x,
// x = (1, z), r the WLS residual; cluster nil means one cluster per row
// (HC0). It is the textbook form the closed forms must equal.
func sandwich(y []float64, z []bool, w []float64, cluster []int) float64 {
	var b [2][2]float64
	var xty [2]float64
	for i := range y {
		x := [2]float64{1, b2f(z[i])}
		for j := range 2 {
			xty[j] += w[i] * x[j] * y[i]
			for k := range 2 {
				b[j][k] += w[i] * x[j] * x[k]
			}
		}
	}
	det := b[0][0]*b[1][1] - b[0][1]*b[1][0]
	inv := [2][2]float64{{b[1][1] / det, -b[0][1] / det}, {-b[1][0] / det, b[0][0] / det}}
	beta := [2]float64{inv[0][0]*xty[0] + inv[0][1]*xty[1], inv[1][0]*xty[0] + inv[1][1]*xty[1]}
	u := map[int]*[2]float64{}
	for i := range y {
		g := i
		if cluster != nil {
			g = cluster[i]
		}
		if u[g] == nil {
			u[g] = &[2]float64{}
		}
		x := [2]float64{1, b2f(z[i])}
		r := y[i] - beta[0] - beta[1]*x[1]
		u[g][0] += w[i] * r * x[0]
		u[g][1] += w[i] * r * x[1]
	}
	var m [2][2]float64
	for _, ug := range u {
		for j := range 2 {
			for k := range 2 {
				m[j][k] += ug[j] * ug[k]
			}
		}
	}
	// (B⁻¹ M B⁻¹)[1][1]
	var v float64
	for j := range 2 {
		for k := range 2 {
			v += inv[1][j] * m[j][k] * inv[k][1]
		}
	}
	if cluster != nil {
		g := float64(len(u))
		v *= g / (g - 1)
	}
	return v
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// The closed forms equal the general sandwich matrices on random data
// (HC0: White 1980; clusters: Liang & Zeger 1986), as the brief asks.
func TestClosedFormEqualsSandwich(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 7))
	for rep := range 20 {
		n := 5 + r.IntN(200)
		y := make([]float64, n)
		z := make([]bool, n)
		w := make([]float64, n)
		cl := make([]int, n)
		for i := range y {
			z[i] = i%2 == 0 || r.Float64() < 0.3
			y[i] = 100 + 3*b2f(z[i]) + r.NormFloat64()*(1+b2f(z[i]))
			w[i] = 0.05 + r.ExpFloat64()
			cl[i] = r.IntN(1 + n/3)
		}
		e, err := Difference(y, z, w)
		if err != nil {
			t.Fatal(err)
		}
		if v := sandwich(y, z, w, nil); !near(e.SE*e.SE, v, 1e-9) {
			t.Errorf("rep %d: HC0 closed form %v, sandwich %v", rep, e.SE*e.SE, v)
		}
		c, err := ClusteredDifference(y, z, w, cl)
		if err != nil {
			t.Fatal(err)
		}
		if v := sandwich(y, z, w, cl); !near(c.SE*c.SE, v, 1e-9) || c.Estimate != e.Estimate {
			t.Errorf("rep %d: cluster closed form %v, sandwich %v", rep, c.SE*c.SE, v)
		}
		// One cluster per row: CR0·n/(n−1) = HC0·n/(n−1).
		own := make([]int, n)
		for i := range own {
			own[i] = i
		}
		c1, _ := ClusteredDifference(y, z, w, own)
		if !near(c1.SE*c1.SE, e.SE*e.SE*float64(n)/float64(n-1), 1e-12) {
			t.Errorf("rep %d: singleton clusters %v, HC0·n/(n−1) %v", rep, c1.SE*c1.SE, e.SE*e.SE*float64(n)/float64(n-1))
		}
	}
}

func TestErrors(t *testing.T) {
	nan := math.NaN()
	z := []bool{true, true, false, false}
	tests := []struct {
		name  string
		y, w  []float64
		cl    []int
		empty bool
		want  string
	}{
		{"no treated weight", []float64{1, 2, 3, 4}, []float64{0, 0, 1, 1}, nil, true, "no treated unit"},
		{"treated all missing", []float64{nan, nan, 3, 4}, nil, nil, true, "no treated unit"},
		{"no control weight", []float64{1, 2, 3, 4}, []float64{1, 1, 0, 0}, nil, true, "no control unit"},
		{"negative weight", []float64{1, 2, 3, 4}, []float64{1, -1, 1, 1}, nil, false, "row 1"},
		{"NaN weight", []float64{1, 2, 3, 4}, []float64{1, 1, nan, 1}, nil, false, "row 2"},
		{"infinite weight", []float64{1, 2, 3, 4}, []float64{1, 1, 1, math.Inf(1)}, nil, false, "row 3"},
		{"infinite outcome", []float64{1, math.Inf(-1), 3, 4}, nil, nil, false, "row 1"},
		{"one cluster", []float64{1, 2, 3, 4}, nil, []int{7, 7, 7, 7}, false, "at least 2"},
		{"one usable cluster", []float64{1, 2, 3, 4}, []float64{1, 1, 1, 0}, []int{7, 7, 7, 8}, false, "at least 2"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var err error
			if tc.cl == nil {
				_, err = Difference(tc.y, z, tc.w)
			} else {
				_, err = ClusteredDifference(tc.y, z, tc.w, tc.cl)
			}
			if err == nil || !strings.Contains(err.Error(), tc.want) || errors.Is(err, ErrEmptyArm) != tc.empty {
				t.Errorf("error %v, want one containing %q (ErrEmptyArm %v)", err, tc.want, tc.empty)
			}
		})
	}
}

func TestLengthMismatchPanics(t *testing.T) {
	fs := map[string]func(){
		"z":       func() { Difference([]float64{1, 2}, []bool{true}, nil) },
		"w":       func() { Difference([]float64{1, 2}, []bool{true, false}, []float64{1}) },
		"cluster": func() { ClusteredDifference([]float64{1, 2}, []bool{true, false}, nil, []int{1}) },
	}
	for name, f := range fs {
		t.Run(name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Errorf("%s mismatch did not panic", name)
				}
			}()
			f()
		})
	}
}

type refCase struct {
	Estimate float64  `json:"estimate"`
	SEHC0    float64  `json:"se_hc0"`
	SECR     *float64 `json:"se_cr"`
	N        int      `json:"n"`
	Clusters int      `json:"clusters"`
}

type refData struct {
	y, w    []float64
	z       []bool
	cluster []int
}

func readCase(t *testing.T, file, ycol, clcol string) refData {
	t.Helper()
	f, err := os.Open(filepath.Join("..", "..", "testdata", "effect", file))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for j, h := range rows[0] {
		col[h] = j
	}
	num := func(s string) float64 {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatalf("%s: %v", file, err)
		}
		return v
	}
	var d refData
	for _, r := range rows[1:] {
		d.y = append(d.y, num(r[col[ycol]]))
		d.w = append(d.w, num(r[col["w"]]))
		d.z = append(d.z, r[col["z"]] == "1")
		if clcol != "" {
			d.cluster = append(d.cluster, int(num(r[col[clcol]])))
		}
	}
	return d
}

// Agreement with statsmodels WLS(...).fit(cov_type="HC0") and
// fit(cov_type="cluster", use_correction=False)·√(G/(G−1)), and with R
// lm(weights=) + sandwich::vcovHC(type="HC0") / vcovCL(type="HC0",
// cadjust=TRUE), on data bundled with statsmodels (spector, a spector
// matched sample with reused controls, fair): testdata/effect/
// make_reference.py and make_reference.R. Tolerance 1e-9 relative (R's
// JSON carries 15 digits).
func TestAgainstReferenceLibraries(t *testing.T) {
	cases := []struct {
		key, file, y, cluster string
	}{
		{"spector_GPA", "spector.csv", "GPA", ""},
		{"spector_GRADE", "spector.csv", "GRADE", ""},
		{"spector_sets", "spector_sets.csv", "GPA", "set"},
		{"fair", "fair.csv", "affairs", "cluster"},
	}
	for _, lib := range []string{"statsmodels_reference.json", "R_reference.json"} {
		raw, err := os.ReadFile(filepath.Join("..", "..", "testdata", "effect", lib))
		if err != nil {
			t.Fatal(err)
		}
		var ref map[string]json.RawMessage
		if err := json.Unmarshal(raw, &ref); err != nil {
			t.Fatal(err)
		}
		for _, c := range cases {
			t.Run(lib+"/"+c.key, func(t *testing.T) {
				var want refCase
				if err := json.Unmarshal(ref[c.key], &want); err != nil {
					t.Fatal(err)
				}
				d := readCase(t, c.file, c.y, c.cluster)
				e, err := Difference(d.y, d.z, d.w)
				if err != nil {
					t.Fatal(err)
				}
				if e.NTreated+e.NControl != want.N {
					t.Errorf("rows used %d, reference %d", e.NTreated+e.NControl, want.N)
				}
				if !near(e.Estimate, want.Estimate, 1e-9) || !near(e.SE, want.SEHC0, 1e-9) {
					t.Errorf("estimate %.15g SE %.15g, reference %.15g %.15g", e.Estimate, e.SE, want.Estimate, want.SEHC0)
				}
				if c.cluster == "" {
					return
				}
				if want.SECR == nil {
					t.Fatal("reference lacks se_cr")
				}
				ce, err := ClusteredDifference(d.y, d.z, d.w, d.cluster)
				if err != nil {
					t.Fatal(err)
				}
				if !near(ce.SE, *want.SECR, 1e-9) || ce.Estimate != e.Estimate {
					t.Errorf("cluster SE %.15g, reference %.15g", ce.SE, *want.SECR)
				}
			})
		}
	}
}

// Simulation with a planted effect (CHECKS.md "kinds of check"):
// stratified randomisation with known probabilities 0.3/0.7, inverse-
// probability ATE weights, true effect 2. Over 200 seeded replicates the
// 95% interval must cover the truth in 90–99% of them.
func TestCoverageRandomised(t *testing.T) {
	r := rand.New(rand.NewPCG(20261201, 1))
	const reps, n, truth = 200, 300, 2.0
	covered := 0
	for range reps {
		y := make([]float64, n)
		z := make([]bool, n)
		w := make([]float64, n)
		for i := range y {
			x := r.Float64() < 0.5
			e := 0.3
			if x {
				e = 0.7
			}
			z[i] = r.Float64() < e
			y[i] = 1 + 3*b2f(x) + truth*b2f(z[i]) + r.NormFloat64()*(1+b2f(x))
			if z[i] {
				w[i] = 1 / e
			} else {
				w[i] = 1 / (1 - e)
			}
		}
		est, err := Difference(y, z, w)
		if err != nil {
			t.Fatal(err)
		}
		if est.CILow <= truth && truth <= est.CIHigh {
			covered++
		}
	}
	rate := float64(covered) / reps
	t.Logf("HC0 coverage %.3f", rate)
	if rate < 0.90 || rate > 0.99 {
		t.Errorf("coverage %.3f outside [0.90, 0.99]", rate)
	}
}

// Clustered simulation: 100 clusters of 4 rows sharing a random effect
// (intra-cluster correlation 0.5), treatment assigned by cluster, true
// effect 2. The cluster-robust interval must cover in 90–99% of 200
// replicates; the HC0 interval, which treats rows as independent, must not
// (design effect 1 + 3·0.5 = 2.5 makes it too narrow) — the reason matched
// samples use ClusteredDifference.
func TestCoverageClustered(t *testing.T) {
	r := rand.New(rand.NewPCG(20261201, 2))
	const reps, g, m, truth = 200, 100, 4, 2.0
	var coveredCR, coveredHC0 int
	for range reps {
		y := make([]float64, 0, g*m)
		z := make([]bool, 0, g*m)
		cl := make([]int, 0, g*m)
		for c := range g {
			treated := r.Float64() < 0.5
			u := r.NormFloat64()
			for range m {
				y = append(y, 1+truth*b2f(treated)+u+r.NormFloat64())
				z = append(z, treated)
				cl = append(cl, c)
			}
		}
		ce, err := ClusteredDifference(y, z, nil, cl)
		if err != nil {
			t.Fatal(err)
		}
		he, _ := Difference(y, z, nil)
		if ce.CILow <= truth && truth <= ce.CIHigh {
			coveredCR++
		}
		if he.CILow <= truth && truth <= he.CIHigh {
			coveredHC0++
		}
	}
	cr, hc0 := float64(coveredCR)/reps, float64(coveredHC0)/reps
	t.Logf("cluster-robust coverage %.3f, HC0 coverage %.3f", cr, hc0)
	if cr < 0.90 || cr > 0.99 {
		t.Errorf("cluster-robust coverage %.3f outside [0.90, 0.99]", cr)
	}
	if hc0 >= 0.90 {
		t.Errorf("HC0 coverage %.3f with correlated rows; expected undercoverage", hc0)
	}
}

func BenchmarkClusteredDifference(b *testing.B) {
	n := 1_000_000
	r := rand.New(rand.NewPCG(1, 1))
	y := make([]float64, n)
	z := make([]bool, n)
	w := make([]float64, n)
	cl := make([]int, n)
	for i := range y {
		z[i] = i%3 == 0
		y[i] = r.NormFloat64()
		w[i] = 1
		cl[i] = i / 3
	}
	b.ResetTimer()
	for b.Loop() {
		if _, err := ClusteredDifference(y, z, w, cl); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}
