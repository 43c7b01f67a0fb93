package effect

import (
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// Hand-worked delta method (formulas in Contrasts' doc comment; the
// log-scale delta method for a ratio of proportions is textbook, common
// practice). Unweighted: treated 2 events of 4, controls 1 of 4; p₁ = 1/2,
// p₀ = 1/4. Var(p̂) under HC0 is p(1−p)/n for an unweighted arm, so
// Var(ln RR) = (1−p₁)/(n₁p₁) + (1−p₀)/(n₀p₀) = 1/4 + 3/4 = 1 and
// Var(ln OR) = 1/(n₁p₁(1−p₁)) + 1/(n₀p₀(1−p₀)) = 1 + 4/3, Woolf's formula
// 1/a + 1/b + 1/c + 1/d = 1/2+1/2+1/1+1/3.
func TestContrastsHandWorked(t *testing.T) {
	y := []float64{1, 1, 0, 0, 1, 0, 0, 0}
	z := []bool{true, true, true, true, false, false, false, false}
	est, err := Contrasts(y, z, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	want := []struct {
		contrast string
		est, se  float64
	}{
		{ContrastDifference, 0.25, math.Sqrt(0.25/4 + 0.1875/4)},
		{ContrastRiskRatio, 2, 1},
		{ContrastOddsRatio, 3, math.Sqrt(1 + 4.0/3)},
	}
	for k, w := range want {
		e := est[k]
		if e.Contrast != w.contrast || !near(e.Estimate, w.est, 1e-14) || !near(e.SE, w.se, 1e-14) {
			t.Errorf("%s: %v SE %v (contrast %q), want %v %v", w.contrast, e.Estimate, e.SE, e.Contrast, w.est, w.se)
		}
		if k > 0 {
			l := math.Log(w.est)
			if !near(e.CILow, math.Exp(l-1.959963984540054*w.se), 1e-13) || !near(e.CIHigh, math.Exp(l+1.959963984540054*w.se), 1e-13) ||
				!near(e.Z, l/w.se, 1e-13) {
				t.Errorf("%s: CI [%v, %v] Z %v", w.contrast, e.CILow, e.CIHigh, e.Z)
			}
		}
	}
}

type contrastRef struct {
	P1      float64 `json:"p1"`
	P0      float64 `json:"p0"`
	LogRR   float64 `json:"log_rr"`
	SELogRR float64 `json:"se_log_rr"`
	LogOR   float64 `json:"log_or"`
	SELogOR float64 `json:"se_log_or"`
}

// Agreement with statsmodels 0.13.5 GLM(Binomial(link=Log / Logit),
// var_weights=w).fit(cov_type="HC0") and fit(cov_type="cluster",
// use_correction=False)·√(G/(G−1)) — the coefficient of z and its SE — on
// data bundled with statsmodels (spector with overlap weights; a spector
// matched sample clustered by set; fair with IPW, HC0 and clustered):
// testdata/effect/make_contrasts.py. Tolerance 1e-8 relative (IRLS
// converged to 1e-14).
func TestContrastsStatsmodels(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "testdata", "effect", "contrasts_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	var ref map[string]json.RawMessage
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	grade := readCase(t, "spector.csv", "GRADE", "").y
	sets := readCase(t, "spector_sets.csv", "unit", "set")
	for i, u := range sets.y {
		sets.y[i] = grade[int(u)]
	}
	fair := readCase(t, "fair.csv", "affairs", "cluster")
	for i, a := range fair.y {
		fair.y[i] = b2f(a > 1)
	}
	spector := readCase(t, "spector.csv", "GRADE", "")
	cases := []struct {
		key       string
		d         refData
		clustered bool
	}{
		{"spector", spector, false},
		{"spector_sets", sets, true},
		{"fair_hc0", fair, false},
		{"fair_cluster", fair, true},
	}
	for _, tc := range cases {
		t.Run(tc.key, func(t *testing.T) {
			var r contrastRef
			if err := json.Unmarshal(ref[tc.key], &r); err != nil {
				t.Fatal(err)
			}
			var cl []int
			if tc.clustered {
				cl = tc.d.cluster
			}
			est, err := Contrasts(tc.d.y, tc.d.z, tc.d.w, cl)
			if err != nil {
				t.Fatal(err)
			}
			if !near(est[0].Estimate, r.P1-r.P0, 1e-12) {
				t.Errorf("risk difference %v, want %v", est[0].Estimate, r.P1-r.P0)
			}
			if !near(math.Log(est[1].Estimate), r.LogRR, 1e-9) || !near(est[1].SE, r.SELogRR, 1e-8) {
				t.Errorf("log RR %v SE %v, statsmodels %v %v", math.Log(est[1].Estimate), est[1].SE, r.LogRR, r.SELogRR)
			}
			if !near(math.Log(est[2].Estimate), r.LogOR, 1e-9) || !near(est[2].SE, r.SELogOR, 1e-8) {
				t.Errorf("log OR %v SE %v, statsmodels %v %v", math.Log(est[2].Estimate), est[2].SE, r.LogOR, r.SELogOR)
			}
			// The difference is exactly Difference / ClusteredDifference.
			var d Estimate
			if tc.clustered {
				d, _ = ClusteredDifference(tc.d.y, tc.d.z, tc.d.w, cl)
			} else {
				d, _ = Difference(tc.d.y, tc.d.z, tc.d.w)
			}
			if est[0].Estimate != d.Estimate || est[0].SE != d.SE {
				t.Errorf("difference %v SE %v, Difference gives %v %v", est[0].Estimate, est[0].SE, d.Estimate, d.SE)
			}
		})
	}
}

func TestContrastsErrors(t *testing.T) {
	z := []bool{true, true, false, false}
	tests := []struct {
		name string
		y    []float64
		is   error
	}{
		{"non-binary", []float64{1, 2, 0, 1}, nil},
		{"no control events", []float64{1, 0, 0, 0}, ErrDegenerateRisk},
		{"all treated events", []float64{1, 1, 0, 1}, ErrDegenerateRisk},
		{"empty arm", []float64{math.NaN(), math.NaN(), 0, 1}, ErrEmptyArm},
	}
	for _, tc := range tests {
		_, err := Contrasts(tc.y, z, nil, nil)
		if err == nil || (tc.is != nil && !errors.Is(err, tc.is)) {
			t.Errorf("%s: error %v, want %v", tc.name, err, tc.is)
		}
	}
}
