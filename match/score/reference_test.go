package score

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// Reference data and values live in testdata/score at the repository root;
// make_reference.py and make_reference_glm.R there wrote them once.
var refDir = filepath.Join("..", "..", "testdata", "score")

// table is a CSV file held column by column.
type table struct {
	names []string
	cols  map[string][]string
}

func readTable(t *testing.T, file string) table {
	t.Helper()
	f, err := os.Open(filepath.Join(refDir, file))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", file, err)
	}
	tb := table{names: recs[0], cols: map[string][]string{}}
	for _, r := range recs[1:] {
		for j, name := range tb.names {
			tb.cols[name] = append(tb.cols[name], r[j])
		}
	}
	return tb
}

func (tb table) float(t *testing.T, name string) []float64 {
	t.Helper()
	s, ok := tb.cols[name]
	if !ok {
		t.Fatalf("no column %s", name)
	}
	v := make([]float64, len(s))
	for i, x := range s {
		f, err := strconv.ParseFloat(x, 64)
		if err != nil {
			t.Fatalf("column %s row %d: %v", name, i, err)
		}
		v[i] = f
	}
	return v
}

func (tb table) bool(t *testing.T, name string) []bool {
	t.Helper()
	v := tb.float(t, name)
	z := make([]bool, len(v))
	for i, x := range v {
		switch x {
		case 0:
		case 1:
			z[i] = true
		default:
			t.Fatalf("column %s row %d: %v is not 0/1", name, i, x)
		}
	}
	return z
}

// dummies expands a categorical column into indicator columns, one per
// level except the first in ascending order (the reference level), named
// "col=level" — the coding R's contr.treatment and the cohort reader use.
func dummies(name string, v []float64) ([][]float64, []string) {
	levels := slices.Clone(v)
	slices.Sort(levels)
	levels = slices.Compact(levels)
	var cols [][]float64
	var names []string
	for _, lv := range levels[1:] {
		c := make([]float64, len(v))
		for i, x := range v {
			if x == lv {
				c[i] = 1
			}
		}
		cols = append(cols, c)
		names = append(names, fmt.Sprintf("%s=%g", name, lv))
	}
	return cols, names
}

type refFit struct {
	Names      []string  `json:"names"`
	Coef       []float64 `json:"coef"`
	SE         []float64 `json:"se"`
	LogLik     float64   `json:"loglik"`
	NullLogLik float64   `json:"null_loglik"`
	Lambda     float64   `json:"lambda"`
	Data       string    `json:"data"`
}

func readJSON(t *testing.T, file string, v any) {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(refDir, file))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", file, err)
	}
}

// spector returns GRADE ~ GPA + TUCE + PSI.
func spector(t *testing.T) ([][]float64, []string, []bool) {
	t.Helper()
	tb := readTable(t, "spector.csv")
	names := []string{"GPA", "TUCE", "PSI"}
	var x [][]float64
	for _, n := range names {
		x = append(x, tb.float(t, n))
	}
	return x, names, tb.bool(t, "GRADE")
}

// fair returns affair ~ rate_marriage (categorical) + religious
// (categorical) + age + yrs_married + educ.
func fair(t *testing.T) ([][]float64, []string, []bool) {
	t.Helper()
	tb := readTable(t, "fair.csv")
	var x [][]float64
	var names []string
	for _, c := range []string{"rate_marriage", "religious"} {
		dc, dn := dummies(c, tb.float(t, c))
		x = append(x, dc...)
		names = append(names, dn...)
	}
	for _, c := range []string{"age", "yrs_married", "educ"} {
		x = append(x, tb.float(t, c))
		names = append(names, c)
	}
	return x, names, tb.bool(t, "affair")
}

func separated(t *testing.T, set string) ([][]float64, []string, []bool) {
	t.Helper()
	tb := readTable(t, "separation.csv")
	xs, zs := tb.float(t, "x"), tb.bool(t, "z")
	var x []float64
	var z []bool
	for i, s := range tb.cols["set"] {
		if s == set {
			x = append(x, xs[i])
			z = append(z, zs[i])
		}
	}
	return [][]float64{x}, []string{"x"}, z
}

func relErr(got, want float64) float64 {
	return math.Abs(got-want) / math.Abs(want)
}

func compareFit(t *testing.T, got *Fit, want refFit, tol float64) {
	t.Helper()
	if !slices.Equal(got.Names, want.Names) {
		t.Fatalf("names %v, reference %v", got.Names, want.Names)
	}
	for j, name := range got.Names {
		if e := relErr(got.Coef[j], want.Coef[j]); !(e <= tol) {
			t.Errorf("coef %s = %.12g, reference %.12g (rel. error %.2g)", name, got.Coef[j], want.Coef[j], e)
		}
		if e := relErr(got.SE[j], want.SE[j]); !(e <= tol) {
			t.Errorf("SE %s = %.12g, reference %.12g (rel. error %.2g)", name, got.SE[j], want.SE[j], e)
		}
	}
	if e := relErr(got.LogLik, want.LogLik); !(e <= tol) {
		t.Errorf("log-likelihood %.12g, reference %.12g", got.LogLik, want.LogLik)
	}
}

// TestLogisticReferences checks coefficients, SEs and log-likelihoods
// against statsmodels' Logit and R's glm on two data sets shipped with
// statsmodels, to 1e-6 relative.
func TestLogisticReferences(t *testing.T) {
	var sm, glm struct {
		Spector, Fair refFit
	}
	readJSON(t, "statsmodels.json", &sm)
	readJSON(t, "glm.json", &glm)
	tests := []struct {
		name string
		data func(*testing.T) ([][]float64, []string, []bool)
		want refFit
	}{
		// Spector & Mazzeo (1980) via statsmodels.datasets.spector; the
		// published fit (CHECKS.md) is const −13.0213, GPA 2.8261,
		// TUCE 0.0952, PSI 2.3787.
		{"spector/statsmodels", spector, sm.Spector},
		{"spector/R glm", spector, glm.Spector},
		// Fair (1978) via statsmodels.datasets.fair, affairs > 0 on two
		// categorical and three numeric covariates.
		{"fair/statsmodels", fair, sm.Fair},
		{"fair/R glm", fair, glm.Fair},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			x, names, z := tc.data(t)
			fit, err := FitModel(x, names, z, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if !fit.Converged {
				t.Fatal("not converged")
			}
			compareFit(t, fit, tc.want, 1e-6)
			if e := relErr(fit.NullLogLik, tc.want.NullLogLik); !(e <= 1e-6) {
				t.Errorf("null log-likelihood %.12g, reference %.12g", fit.NullLogLik, tc.want.NullLogLik)
			}
		})
	}
	// The published values, as printed to four decimals (CHECKS.md).
	x, names, z := spector(t)
	fit, err := FitModel(x, names, z, Options{})
	if err != nil {
		t.Fatal(err)
	}
	for j, want := range []float64{-13.0213, 2.8261, 0.0952, 2.3787} {
		if math.Abs(fit.Coef[j]-want) > 0.5e-4 {
			t.Errorf("spector %s = %.6f, published %.4f", fit.Names[j], fit.Coef[j], want)
		}
	}
}

// TestRidgeReference checks the ridge fit against scipy.optimize.minimize
// of the same penalised log-likelihood (ridge.json, convention in
// make_reference.py and Options.Lambda), to 1e-6 relative.
func TestRidgeReference(t *testing.T) {
	var ref struct{ Fits []refFit }
	readJSON(t, "ridge.json", &ref)
	if len(ref.Fits) == 0 {
		t.Fatal("no reference fits")
	}
	data := func(name string) func(*testing.T) ([][]float64, []string, []bool) {
		switch name {
		case "spector":
			return spector
		case "fair":
			return fair
		}
		if set, ok := strings.CutPrefix(name, "separation:"); ok {
			return func(t *testing.T) ([][]float64, []string, []bool) { return separated(t, set) }
		}
		return nil
	}
	for _, want := range ref.Fits {
		t.Run(fmt.Sprintf("%s/lambda=%g", want.Data, want.Lambda), func(t *testing.T) {
			get := data(want.Data)
			if get == nil {
				t.Fatalf("unknown data set %q", want.Data)
			}
			x, names, z := get(t)
			fit, err := FitModel(x, names, z, Options{Model: Ridge, Lambda: want.Lambda})
			if err != nil {
				t.Fatal(err)
			}
			compareFit(t, fit, want, 1e-6)
		})
	}
}

// TestRidgeDefaultLambda checks that Lambda 0 means DefaultLambda.
func TestRidgeDefaultLambda(t *testing.T) {
	x, names, z := spector(t)
	a, err := FitModel(x, names, z, Options{Model: Ridge})
	if err != nil {
		t.Fatal(err)
	}
	b, err := FitModel(x, names, z, Options{Model: Ridge, Lambda: DefaultLambda})
	if err != nil {
		t.Fatal(err)
	}
	if a.Lambda != DefaultLambda || !slices.Equal(a.Coef, b.Coef) {
		t.Errorf("Lambda 0 gave λ=%g, coef %v; want λ=%g, coef %v", a.Lambda, a.Coef, DefaultLambda, b.Coef)
	}
}
