package score

import (
	"errors"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"strings"
	"testing"
)

// synth draws a seeded design with numeric columns N(0,1), one skewed
// column and a categorical covariate with `levels` levels (as dummies), and
// treatment from a logistic model with the given intercept and slope on
// every column.
func synth(seed uint64, n, numeric, levels int, intercept, slope float64) ([][]float64, []string, []bool) {
	r := rand.New(rand.NewPCG(seed, 1))
	var x [][]float64
	var names []string
	for j := range numeric {
		c := make([]float64, n)
		for i := range c {
			c[i] = r.NormFloat64()
			if j == 0 {
				c[i] = math.Exp(c[i]) // skewed, like a cost or a count
			}
		}
		x = append(x, c)
		names = append(names, "x"+string(rune('a'+j%26))+strings.Repeat("'", j/26))
	}
	if levels > 1 {
		cat := make([]float64, n)
		for i := range cat {
			cat[i] = float64(r.IntN(levels))
		}
		dc, dn := dummies("cat", cat)
		x = append(x, dc...)
		names = append(names, dn...)
	}
	z := make([]bool, n)
	for i := range z {
		eta := intercept
		for _, c := range x {
			eta += slope * c[i]
		}
		z[i] = r.Float64() < 1/(1+math.Exp(-eta))
	}
	return x, names, z
}

// TestScoreEquations checks the defining property of the logistic MLE with
// an intercept: Σ(z_i − e_i) = 0 and Σ x_ij (z_i − e_i) = 0 (the score
// equations of the canonical link; McCullagh & Nelder 1989), which is what
// makes overlap weights balance the model covariates exactly (Li, Morgan &
// Zaslavsky 2018, CHECKS.md). Checked relative to Σ|x_ij (z_i − e_i)|, to
// 1e-8, on random data that spans several blocks and ends in a partial chunk.
func TestScoreEquations(t *testing.T) {
	tests := []struct {
		name               string
		seed               uint64
		n, numeric, levels int
		intercept, slope   float64
	}{
		{"small", 1, 200, 3, 0, 0, 0.5},
		{"rare treatment", 2, 5000, 4, 3, -3, 0.3},
		{"several blocks", 3, 3*blockRows + 517, 6, 5, 0.5, 0.2},
		{"strong predictors", 4, 20000, 3, 2, 0, 1.5},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			x, names, z := synth(tc.seed, tc.n, tc.numeric, tc.levels, tc.intercept, tc.slope)
			fit, err := FitModel(x, names, z, Options{})
			if err != nil {
				t.Fatal(err)
			}
			check := func(name string, col func(i int) float64) {
				t.Helper()
				var s, scale float64
				for i, ps := range fit.PS {
					r := -ps
					if z[i] {
						r = 1 - ps
					}
					s += col(i) * r
					scale += math.Abs(col(i) * r)
				}
				if math.Abs(s) > 1e-8*scale {
					t.Errorf("Σ %s·(z − ps) = %g (scale %g)", name, s, scale)
				}
			}
			check("1", func(int) float64 { return 1 })
			for j, c := range x {
				check(names[j], func(i int) float64 { return c[i] })
			}
		})
	}
}

// TestLinearPredictor checks that Logit is β₀ + Σβ_j x_j with the reported
// original-scale coefficients and that PS = 1/(1 + e^−Logit): the
// back-transformation from the internal standardised scale (definition).
func TestLinearPredictor(t *testing.T) {
	for _, m := range []Model{Logistic, Ridge} {
		t.Run(m.String(), func(t *testing.T) {
			x, names, z := synth(7, 3000, 4, 3, -1, 0.7)
			fit, err := FitModel(x, names, z, Options{Model: m})
			if err != nil {
				t.Fatal(err)
			}
			for i := range z {
				eta := fit.Coef[0]
				scale := math.Abs(eta)
				for j, c := range x {
					eta += fit.Coef[j+1] * c[i]
					scale += math.Abs(fit.Coef[j+1] * c[i])
				}
				if math.Abs(fit.Logit[i]-eta) > 1e-12*scale {
					t.Fatalf("unit %d: Logit %.17g, Xβ %.17g", i, fit.Logit[i], eta)
				}
				if ps := 1 / (1 + math.Exp(-eta)); math.Abs(fit.PS[i]-ps) > 1e-14 {
					t.Fatalf("unit %d: PS %.17g, logistic(Xβ) %.17g", i, fit.PS[i], ps)
				}
			}
		})
	}
}

// TestAffineInvariance: rescaling and shifting a column, x → a·x + b,
// divides its coefficient and SE by a and leaves every other slope, SE and
// the fitted scores unchanged — for the logistic MLE (equivariance of
// maximum likelihood under reparametrisation) and for the ridge fit, whose
// penalty is on standardised columns (Options.Lambda). Common practice.
func TestAffineInvariance(t *testing.T) {
	for _, m := range []Model{Logistic, Ridge} {
		t.Run(m.String(), func(t *testing.T) {
			x, names, z := synth(11, 2000, 3, 3, 0, 0.6)
			base, err := FitModel(x, names, z, Options{Model: m})
			if err != nil {
				t.Fatal(err)
			}
			const a, b = 1000.0, -250.0
			moved := slices.Clone(x)
			moved[1] = make([]float64, len(x[1]))
			for i, v := range x[1] {
				moved[1][i] = a*v + b
			}
			fit, err := FitModel(moved, names, z, Options{Model: m})
			if err != nil {
				t.Fatal(err)
			}
			for j := 1; j < len(base.Coef); j++ {
				div := 1.0
				if j == 2 {
					div = a
				}
				if e := relErr(fit.Coef[j]*div, base.Coef[j]); e > 1e-8 {
					t.Errorf("coef %s: %g·%g vs %g", names[j-1], fit.Coef[j], div, base.Coef[j])
				}
				if e := relErr(fit.SE[j]*div, base.SE[j]); e > 1e-8 {
					t.Errorf("SE %s: %g·%g vs %g", names[j-1], fit.SE[j], div, base.SE[j])
				}
			}
			for i := range base.PS {
				if math.Abs(fit.PS[i]-base.PS[i]) > 1e-10 {
					t.Fatalf("unit %d: PS %g vs %g", i, fit.PS[i], base.PS[i])
				}
			}
		})
	}
}

// TestDeterministic checks that results are bit-identical whatever the
// number of goroutines, because block partials are summed in a fixed order.
func TestDeterministic(t *testing.T) {
	x, names, z := synth(5, 2*blockRows+100, 5, 4, 0, 0.3)
	defer runtime.GOMAXPROCS(runtime.GOMAXPROCS(0))
	var first *Fit
	for _, procs := range []int{1, 2, 3} {
		runtime.GOMAXPROCS(procs)
		fit, err := FitModel(x, names, z, Options{})
		if err != nil {
			t.Fatal(err)
		}
		if first == nil {
			first = fit
			continue
		}
		if !slices.Equal(fit.Coef, first.Coef) || !slices.Equal(fit.SE, first.SE) || !slices.Equal(fit.Logit, first.Logit) {
			t.Errorf("GOMAXPROCS=%d: results differ from GOMAXPROCS=1", procs)
		}
	}
}

// TestSeparation: data separated by construction must give a
// SeparationError naming the column; R's glm warns "fitted probabilities
// numerically 0 or 1 occurred" on the same sets (glm.json). The ridge
// model fits them with finite coefficients.
func TestSeparation(t *testing.T) {
	var glm struct {
		Separation map[string]struct{ Warnings []string }
	}
	readJSON(t, "glm.json", &glm)

	// A larger quasi-separated set: every unit at site 3 is treated.
	big := func(*testing.T) ([][]float64, []string, []bool) {
		x, names, z := synth(9, 3000, 3, 5, 0, 0.5)
		site3 := x[slices.Index(names, "cat=3")]
		for i, v := range site3 {
			if v == 1 {
				z[i] = true
			}
		}
		return x, names, z
	}
	// Complete separation by a combination of two columns.
	diag := func(*testing.T) ([][]float64, []string, []bool) {
		r := rand.New(rand.NewPCG(3, 3))
		n := 400
		a, b, c := make([]float64, n), make([]float64, n), make([]float64, n)
		z := make([]bool, n)
		for i := range z {
			a[i], b[i], c[i] = r.NormFloat64(), r.NormFloat64(), r.NormFloat64()
			z[i] = a[i]+b[i] > 0
		}
		return [][]float64{c, a, b}, []string{"noise", "a", "b"}, z
	}
	tests := []struct {
		name     string
		data     func(*testing.T) ([][]float64, []string, []bool)
		glmSet   string // set in glm.json whose warnings confirm separation
		complete bool
		units    int // perfectly predicted units; 0 = don't check
		columns  []string
	}{
		{"complete", func(t *testing.T) ([][]float64, []string, []bool) { return separated(t, "complete") }, "complete", true, 10, []string{"x"}},
		{"quasi", func(t *testing.T) ([][]float64, []string, []bool) { return separated(t, "quasi") }, "quasi", false, 8, []string{"x"}},
		{"quasi by a category", big, "", false, 0, []string{"cat=3"}},
		{"complete by two columns", diag, "", true, 400, []string{"a", "b"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if tc.glmSet != "" {
				w := glm.Separation[tc.glmSet].Warnings
				if !slices.Contains(w, "glm.fit: fitted probabilities numerically 0 or 1 occurred") {
					t.Fatalf("reference: glm did not flag set %s as separated: %q", tc.glmSet, w)
				}
			}
			x, names, z := tc.data(t)
			fit, err := FitModel(x, names, z, Options{})
			var se *SeparationError
			if !errors.As(err, &se) {
				t.Fatalf("got fit %v, error %v; want a SeparationError", fit, err)
			}
			if !errors.Is(err, ErrBadInput) || fit != nil {
				t.Errorf("want ErrBadInput and no fit, got %v, %v", err, fit)
			}
			if se.Complete != tc.complete || (tc.units > 0 && se.Units != tc.units) {
				t.Errorf("Complete %v, Units %d; want %v, %d", se.Complete, se.Units, tc.complete, tc.units)
			}
			if !slices.Equal(se.Columns, tc.columns) {
				t.Errorf("columns %v, want %v", se.Columns, tc.columns)
			}
			for _, want := range append([]string{"separation", "score.model: ridge"}, tc.columns...) {
				if !strings.Contains(err.Error(), want) {
					t.Errorf("message %q lacks %q", err, want)
				}
			}

			rf, err := FitModel(x, names, z, Options{Model: Ridge})
			if err != nil {
				t.Fatalf("ridge: %v", err)
			}
			for j, c := range rf.Coef {
				if math.IsNaN(c) || math.IsInf(c, 0) || math.IsNaN(rf.SE[j]) || math.IsInf(rf.SE[j], 0) {
					t.Errorf("ridge %s: coef %g, SE %g", rf.Names[j], c, rf.SE[j])
				}
			}
		})
	}
}

// TestInputErrors checks that bad data gives the typed error naming the
// column at fault, matching ErrBadInput.
func TestInputErrors(t *testing.T) {
	col := func(seed uint64, n int) []float64 {
		r := rand.New(rand.NewPCG(seed, 2))
		c := make([]float64, n)
		for i := range c {
			c[i] = r.NormFloat64()
		}
		return c
	}
	const n = 50
	a, b := col(1, n), col(2, n)
	z := make([]bool, n)
	for i := range z {
		z[i] = a[i]+col(3, n)[i] > 0
	}
	lin := make([]float64, n)
	for i := range lin {
		lin[i] = 2*a[i] - b[i] + 1
	}
	with := func(c []float64, i int, v float64) []float64 {
		c = slices.Clone(c)
		c[i] = v
		return c
	}
	constant := make([]float64, n)
	for i := range constant {
		constant[i] = 3
	}
	level := make([]float64, n) // three levels
	for i := range level {
		level[i] = float64(i % 3)
	}
	dc, dn := dummies("site", level)
	full := make([]float64, n) // the reference level's dummy
	for i, v := range level {
		if v == 0 {
			full[i] = 1
		}
	}
	all, none := make([]bool, n), make([]bool, n)
	for i := range all {
		all[i] = true
	}

	tests := []struct {
		name  string
		x     [][]float64
		names []string
		z     []bool
		opt   Options
		check func(t *testing.T, err error)
	}{
		{"constant", [][]float64{a, constant, b}, []string{"a", "c", "b"}, z, Options{},
			wantAs(func(e *ConstantError) bool { return e.Column == "c" }, "c is constant")},
		{"duplicate column", [][]float64{a, b, a}, []string{"a", "b", "a2"}, z, Options{},
			wantAs(func(e *CollinearError) bool { return e.Column == "a2" && slices.Equal(e.Of, []string{"a"}) }, "a2")},
		{"linear combination", [][]float64{a, b, lin}, []string{"a", "b", "c"}, z, Options{},
			wantAs(func(e *CollinearError) bool { return e.Column == "c" && slices.Equal(e.Of, []string{"a", "b"}) }, "c is a linear combination of a, b")},
		{"every level of a category", [][]float64{a, dc[0], dc[1], full}, []string{"a", dn[0], dn[1], "site=0"}, z, Options{},
			wantAs(func(e *CollinearError) bool {
				return e.Column == "site=0" && slices.Equal(e.Of, []string{"site=1", "site=2"})
			}, "site=0")},
		{"two dependent columns", [][]float64{a, b, lin, a}, []string{"a", "b", "c", "d"}, z, Options{},
			wantAs(func(e *CollinearError) bool { return e.Column == "c" && slices.Equal(e.Others, []string{"d"}) }, "so are d")},
		{"more columns than units", [][]float64{a[:3], b[:3], lin[:3]}, []string{"a", "b", "c"}, z[:3], Options{},
			wantAs(func(e *CollinearError) bool { return e.Column == "c" }, "c")},
		{"NaN", [][]float64{a, with(b, 7, math.NaN())}, []string{"a", "b"}, z, Options{},
			wantAs(func(e *NonFiniteError) bool { return e.Column == "b" && e.Unit == 7 && e.Count == 1 }, "b has 1 non-finite")},
		{"Inf", [][]float64{with(with(a, 3, math.Inf(-1)), 9, math.Inf(1)), b}, []string{"a", "b"}, z, Options{},
			wantAs(func(e *NonFiniteError) bool { return e.Column == "a" && e.Unit == 3 && e.Count == 2 }, "a has 2")},
		{"all treated", [][]float64{a}, []string{"a"}, all, Options{},
			wantAs(func(e *TreatmentError) bool { return e.NTreated == n }, "all 50 units are treated")},
		{"none treated", [][]float64{a}, []string{"a"}, none, Options{},
			wantAs(func(e *TreatmentError) bool { return e.NTreated == 0 }, "none of the 50")},
		{"empty", [][]float64{{}}, []string{"a"}, []bool{}, Options{},
			wantAs(func(e *TreatmentError) bool { return e.N == 0 }, "no units")},
		{"negative lambda", [][]float64{a}, []string{"a"}, z, Options{Model: Ridge, Lambda: -1}, wantBad("Lambda")},
		{"lambda for logistic", [][]float64{a}, []string{"a"}, z, Options{Lambda: 2}, wantBad("ridge penalty")},
		{"negative MaxIter", [][]float64{a}, []string{"a"}, z, Options{MaxIter: -1}, wantBad("MaxIter")},
		{"Tol too large", [][]float64{a}, []string{"a"}, z, Options{Tol: 2}, wantBad("Tol")},
		{"unknown model", [][]float64{a}, []string{"a"}, z, Options{Model: 7}, wantBad("unknown model")},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			fit, err := FitModel(tc.x, tc.names, tc.z, tc.opt)
			if fit != nil {
				t.Errorf("got a fit with error %v", err)
			}
			if !errors.Is(err, ErrBadInput) {
				t.Fatalf("error %v does not match ErrBadInput", err)
			}
			tc.check(t, err)
		})
	}
}

// wantAs checks the error's type with errors.As, its fields with ok, and
// that its message contains msg.
func wantAs[E error](ok func(E) bool, msg string) func(*testing.T, error) {
	return func(t *testing.T, err error) {
		t.Helper()
		var e E
		if !errors.As(err, &e) {
			t.Fatalf("error %v (%T) is not a %T", err, err, e)
		}
		if !ok(e) {
			t.Errorf("unexpected fields: %+v", e)
		}
		if !strings.Contains(err.Error(), msg) {
			t.Errorf("message %q lacks %q", err, msg)
		}
	}
}

func wantBad(msg string) func(*testing.T, error) {
	return func(t *testing.T, err error) {
		t.Helper()
		if !strings.Contains(err.Error(), msg) {
			t.Errorf("message %q lacks %q", err, msg)
		}
	}
}

// TestNotConverged: too few iterations give a NotConvergedError that
// suggests ridge, together with the last iterate.
func TestNotConverged(t *testing.T) {
	x, names, z := spector(t)
	fit, err := FitModel(x, names, z, Options{MaxIter: 2})
	var nc *NotConvergedError
	if !errors.As(err, &nc) || !errors.Is(err, ErrBadInput) {
		t.Fatalf("error %v, want NotConvergedError", err)
	}
	if fit == nil || fit.Converged || fit.Iterations != 2 || nc.Iterations != 2 {
		t.Errorf("fit %+v, error %+v", fit, nc)
	}
	if !strings.Contains(err.Error(), "score.model: ridge") {
		t.Errorf("message %q does not suggest ridge", err)
	}
}

// TestPanics: length mismatches are programmer errors.
func TestPanics(t *testing.T) {
	tests := []struct {
		name  string
		x     [][]float64
		names []string
		z     []bool
	}{
		{"names", [][]float64{{1, 2}}, nil, []bool{true, false}},
		{"column length", [][]float64{{1, 2, 3}}, []string{"a"}, []bool{true, false}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			defer func() {
				if recover() == nil {
					t.Error("no panic")
				}
			}()
			_, _ = FitModel(tc.x, tc.names, tc.z, Options{})
		})
	}
}

func TestParseModel(t *testing.T) {
	for _, m := range []Model{Logistic, Ridge} {
		got, err := ParseModel(m.String())
		if err != nil || got != m {
			t.Errorf("ParseModel(%q) = %v, %v", m.String(), got, err)
		}
	}
	if _, err := ParseModel("probit"); !errors.Is(err, ErrBadInput) {
		t.Errorf("ParseModel(probit) error %v", err)
	}
}
