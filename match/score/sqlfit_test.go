package score

import (
	"errors"
	"math"
	"testing"
)

// naiveMoments is a MomentsFunc over in-memory columns written as plainly
// as possible (one loop per unit, no BLAS, no blocks): the stand-in for a
// warehouse's aggregate query, independent of pass.go.
func naiveMoments(x [][]float64, z []bool, center, inv []float64) MomentsFunc {
	return func(b []float64) ([]float64, []float64, float64, int, error) {
		k := len(x) + 1
		info := make([]float64, k*k)
		grad := make([]float64, k)
		var ll float64
		perfect := 0
		row := make([]float64, k)
		for i := range z {
			row[0] = 1
			eta := b[0]
			for j := range x {
				row[j+1] = (x[j][i] - center[j]) * inv[j]
				eta += b[j+1] * row[j+1]
			}
			e := 1 / (1 + math.Exp(-eta))
			r := -e
			if z[i] {
				r = 1 - e
				ll += eta - math.Log1p(math.Exp(eta))
				if eta > sepEta {
					perfect++
				}
			} else {
				ll -= math.Log1p(math.Exp(eta))
				if eta < -sepEta {
					perfect++
				}
			}
			w := e * (1 - e)
			for a := range k {
				grad[a] += row[a] * r
				for c := a; c < k; c++ {
					info[a*k+c] += w * row[a] * row[c]
				}
			}
		}
		return info, grad, ll, perfect, nil
	}
}

// meanSD is the mean and population SD, two-pass.
func meanSD(x [][]float64) (center, inv []float64) {
	for _, col := range x {
		var s float64
		for _, v := range col {
			s += v
		}
		m := s / float64(len(col))
		var ss float64
		for _, v := range col {
			ss += (v - m) * (v - m)
		}
		center = append(center, m)
		inv = append(inv, 1/math.Sqrt(ss/float64(len(col))))
	}
	return center, inv
}

func count(z []bool) int {
	n := 0
	for _, t := range z {
		if t {
			n++
		}
	}
	return n
}

// TestFitMomentsMatchesFitModel: the moments-only driver reaches the
// statsmodels Logit estimates (testdata/score/statsmodels.json, written by
// make_reference.py) to 1e-6 like FitModel, and FitModel's own
// coefficients and SEs to 1e-8 relative, on both registry data sets and
// for the ridge model (ridge.json convention).
func TestFitMomentsMatchesFitModel(t *testing.T) {
	var sm struct{ Spector, Fair refFit }
	readJSON(t, "statsmodels.json", &sm)
	tests := []struct {
		name string
		data func(*testing.T) ([][]float64, []string, []bool)
		opt  Options
		ref  *refFit
	}{
		{"spector logistic", spector, Options{}, &sm.Spector},
		{"fair logistic", fair, Options{}, &sm.Fair},
		{"spector ridge", spector, Options{Model: Ridge, Lambda: 1}, nil},
		{"fair ridge", fair, Options{Model: Ridge, Lambda: 2}, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			x, names, z := tc.data(t)
			c, inv := meanSD(x)
			got, std, err := FitMoments(names, c, inv, len(z), count(z), naiveMoments(x, z, c, inv), tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			if len(std) != len(names)+1 {
				t.Fatalf("%d standardised coefficients", len(std))
			}
			if tc.ref != nil {
				compareFit(t, got, *tc.ref, 1e-6)
			}
			want, err := FitModel(x, names, z, tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			sameAsFitModel(t, "moments", got, want)
			if got.Iterations != want.Iterations || got.PS != nil {
				t.Errorf("iterations %d vs %d, PS %v", got.Iterations, want.Iterations, got.PS != nil)
			}
		})
	}
}

// TestFitMomentsErrors: separation (separation.csv, separated by
// construction), collinearity and a failing moments call give the same
// typed errors as FitModel.
func TestFitMomentsErrors(t *testing.T) {
	x, names, z := separated(t, "complete")
	c, inv := meanSD(x)
	_, _, err := FitMoments(names, c, inv, len(z), count(z), naiveMoments(x, z, c, inv), Options{})
	var se *SeparationError
	if !errors.As(err, &se) || !se.Complete {
		t.Errorf("complete separation: got %v", err)
	}
	x, names, z = separated(t, "quasi")
	c, inv = meanSD(x)
	_, _, err = FitMoments(names, c, inv, len(z), count(z), naiveMoments(x, z, c, inv), Options{})
	if !errors.As(err, &se) || se.Complete {
		t.Errorf("quasi-complete separation: got %v", err)
	}

	x, names, z = spector(t)
	dup := make([]float64, len(z))
	for i := range dup {
		dup[i] = 2*x[0][i] - x[2][i] + 1
	}
	x = append(x, dup)
	names = append(names, "combo")
	c, inv = meanSD(x)
	_, _, err = FitMoments(names, c, inv, len(z), count(z), naiveMoments(x, z, c, inv), Options{})
	var ce *CollinearError
	if !errors.As(err, &ce) || ce.Column != "combo" {
		t.Errorf("collinear: got %v", err)
	}

	boom := errors.New("connection lost")
	x, names, z = spector(t)
	c, inv = meanSD(x)
	_, _, err = FitMoments(names, c, inv, len(z), count(z), func([]float64) ([]float64, []float64, float64, int, error) {
		return nil, nil, 0, 0, boom
	}, Options{})
	if !errors.Is(err, boom) {
		t.Errorf("moments error: got %v", err)
	}
}

// sameAsFitModel checks a moments-driver fit against FitModel's on the
// same data: coefficients and SEs to 1e-8 relative.
func sameAsFitModel(t *testing.T, label string, got, want *Fit) {
	t.Helper()
	for j := range want.Coef {
		if e := relErr(got.Coef[j], want.Coef[j]); !(e <= 1e-8) {
			t.Errorf("coef %s: %s %.15g, FitModel %.15g (rel %.2g)", want.Names[j], label, got.Coef[j], want.Coef[j], e)
		}
		if e := relErr(got.SE[j], want.SE[j]); !(e <= 1e-8) {
			t.Errorf("SE %s: %s %.15g, FitModel %.15g (rel %.2g)", want.Names[j], label, got.SE[j], want.SE[j], e)
		}
	}
}
