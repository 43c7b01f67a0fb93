package score

import (
	"math"
	"testing"
)

// TestFitMomentsFromStart: started from a fit on every other unit (the
// seed warehouse-scale mode takes from a sample), from the answer itself,
// or from a start that must be dropped (NaN, or far worse than the
// intercept-only model), the moments driver still reaches the statsmodels
// Logit estimates (testdata/score/statsmodels.json, make_reference.py) to
// 1e-6 and FitModel's full-data coefficients and SEs to 1e-8 relative,
// and a good start takes fewer Newton steps than the default start.
func TestFitMomentsFromStart(t *testing.T) {
	var sm struct{ Spector, Fair refFit }
	readJSON(t, "statsmodels.json", &sm)
	half := func(x [][]float64, names []string, z []bool) []float64 {
		hx := make([][]float64, len(x))
		var hz []bool
		for i := 0; i < len(z); i += 2 {
			for j := range x {
				hx[j] = append(hx[j], x[j][i])
			}
			hz = append(hz, z[i])
		}
		f, err := FitModel(hx, names, hz, Options{})
		if err != nil {
			t.Fatalf("half-sample fit: %v", err)
		}
		return f.Coef
	}
	tests := []struct {
		name  string
		data  func(*testing.T) ([][]float64, []string, []bool)
		ref   *refFit
		start func(x [][]float64, names []string, z []bool, full *Fit) []float64
		fewer bool
	}{
		{"fair from half sample", fair, &sm.Fair, func(x [][]float64, n []string, z []bool, _ *Fit) []float64 { return half(x, n, z) }, true},
		{"fair from the answer", fair, &sm.Fair, func(_ [][]float64, _ []string, _ []bool, f *Fit) []float64 { return f.Coef }, true},
		{"spector from NaN", spector, &sm.Spector, func(_ [][]float64, n []string, _ []bool, _ *Fit) []float64 {
			s := make([]float64, len(n)+1)
			s[1] = math.NaN()
			return s
		}, false},
		{"spector from far away", spector, &sm.Spector, func(_ [][]float64, n []string, _ []bool, _ *Fit) []float64 {
			s := make([]float64, len(n)+1)
			for j := range s {
				s[j] = 40
			}
			return s
		}, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			x, names, z := tc.data(t)
			c, inv := meanSD(x)
			want, err := FitModel(x, names, z, Options{})
			if err != nil {
				t.Fatal(err)
			}
			got, _, err := FitMomentsFrom(names, c, inv, len(z), count(z), naiveMoments(x, z, c, inv), Options{}, tc.start(x, names, z, want))
			if err != nil {
				t.Fatal(err)
			}
			compareFit(t, got, *tc.ref, 1e-6)
			sameAsFitModel(t, "seeded", got, want)
			if tc.fewer && got.Iterations >= want.Iterations {
				t.Errorf("seeded fit took %d steps, default start %d", got.Iterations, want.Iterations)
			}
			if !tc.fewer && got.Iterations != want.Iterations {
				t.Errorf("dropped start took %d steps, default start %d", got.Iterations, want.Iterations)
			}
		})
	}
}
