package score

import (
	"errors"
	"math"
	"testing"
)

// gradOnly is the GradientFunc of naiveMoments: its score, log-likelihood
// and perfect count, counting calls.
func gradOnly(m MomentsFunc, calls *int) GradientFunc {
	return func(b []float64) ([]float64, float64, int, error) {
		*calls++
		_, g, ll, p, err := m(b)
		return g, ll, p, err
	}
}

// countFull wraps a MomentsFunc, counting calls.
func countFull(m MomentsFunc, calls *int) MomentsFunc {
	return func(b []float64) ([]float64, []float64, float64, int, error) {
		*calls++
		return m(b)
	}
}

// subsample keeps every step-th unit.
func subsample(x [][]float64, z []bool, step int) ([][]float64, []bool) {
	sx := make([][]float64, len(x))
	var sz []bool
	for i := 0; i < len(z); i += step {
		for j := range x {
			sx[j] = append(sx[j], x[j][i])
		}
		sz = append(sz, z[i])
	}
	return sx, sz
}

// TestFitMomentsChord: seeded from a fit on a subsample and that
// subsample's information scaled up (what warehouse-scale mode does), the
// chord driver reaches the statsmodels Logit estimates
// (testdata/score/statsmodels.json, make_reference.py) to 1e-6 and
// FitModel's full-data coefficients and SEs to 1e-8 relative — logistic
// and ridge — with exactly one full moments pass (the rest are gradient
// passes). A useless start information (far too small: every step
// overshoots) still gives the same answer, through the hand-over to
// Newton's method.
func TestFitMomentsChord(t *testing.T) {
	var sm struct{ Spector, Fair refFit }
	readJSON(t, "statsmodels.json", &sm)
	tests := []struct {
		name     string
		data     func(*testing.T) ([][]float64, []string, []bool)
		opt      Options
		ref      *refFit
		step     int     // subsample: every step-th unit
		badInfo  float64 // > 0: startInfo = badInfo × identity instead
		oneFull  bool
		handOver bool
	}{
		{"fair logistic", fair, Options{}, &sm.Fair, 5, 0, true, false},
		{"fair ridge", fair, Options{Model: Ridge, Lambda: 2}, nil, 5, 0, true, false},
		{"spector logistic", spector, Options{}, &sm.Spector, 1, 0, true, false},
		{"fair, useless information", fair, Options{}, &sm.Fair, 5, 1e-3, false, true},
		// Seeded synthetic units (a log-normal column puts 22 of them at
		// |η| > 15 at the estimate): predicted that well is not separation, and the chord
		// iteration must not give up on it (common practice: agreement
		// with FitModel).
		{"synthetic, near-certain units", func(*testing.T) ([][]float64, []string, []bool) {
			x, names, z := synth(2028, 40_000, 6, 4, -1, 0.6)
			return x, names, z
		}, Options{}, nil, 10, 0, true, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			x, names, z := tc.data(t)
			c, inv := meanSD(x)
			sx, sz := subsample(x, z, tc.step)
			seed, err := FitModel(sx, names, sz, tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			k := len(names) + 1
			info := SampleInfo(sx, seed.Coef, c, inv, float64(len(z))/float64(len(sz)))
			if tc.badInfo > 0 {
				info = make([]float64, k*k)
				for j := range k {
					info[j*k+j] = tc.badInfo
				}
			}
			var full, grads int
			m := naiveMoments(x, z, c, inv)
			got, _, passes, err := FitMomentsChord(names, c, inv, len(z), count(z), countFull(m, &full), gradOnly(m, &grads), tc.opt, seed.Coef, info)
			if err != nil {
				t.Fatal(err)
			}
			if passes != grads {
				t.Errorf("reported %d gradient passes, made %d", passes, grads)
			}
			if tc.oneFull && full != 1 {
				t.Errorf("%d full passes, want 1 (and %d gradient passes)", full, grads)
			}
			if tc.handOver && full < 2 {
				t.Errorf("%d full passes: expected the hand-over to Newton's method", full)
			}
			if tc.ref != nil {
				compareFit(t, got, *tc.ref, 1e-6)
			}
			want, err := FitModel(x, names, z, tc.opt)
			if err != nil {
				t.Fatal(err)
			}
			sameAsFitModel(t, "chord", got, want)
			if !got.Converged || got.LogLik != got.LogLik || math.Abs(got.LogLik-want.LogLik) > 1e-8*math.Abs(want.LogLik) {
				t.Errorf("converged %v, log-likelihood %.12g vs %.12g", got.Converged, got.LogLik, want.LogLik)
			}
		})
	}
}

// TestFitMomentsChordErrors: on separated data (separation.csv, separated
// by construction) and on collinear columns the chord driver ends with
// FitMomentsFrom's typed errors, whatever its start.
func TestFitMomentsChordErrors(t *testing.T) {
	for _, set := range []string{"complete", "quasi"} {
		x, names, z := separated(t, set)
		c, inv := meanSD(x)
		m := naiveMoments(x, z, c, inv)
		var calls int
		_, _, _, err := FitMomentsChord(names, c, inv, len(z), count(z), m, gradOnly(m, &calls), Options{}, []float64{0, 0.5}, []float64{10, 0, 0, 10})
		var se *SeparationError
		if !errors.As(err, &se) || se.Complete != (set == "complete") {
			t.Errorf("%s separation: got %v", set, err)
		}
	}
	x, names, z := fair(t)
	x = append(x, append([]float64(nil), x[0]...)) // a copy of the first column
	names = append(names, "copy")
	c, inv := meanSD(x)
	m := naiveMoments(x, z, c, inv)
	k := len(names) + 1
	info := make([]float64, k*k)
	for j := range k {
		info[j*k+j] = float64(len(z))
	}
	var calls int
	_, _, _, err := FitMomentsChord(names, c, inv, len(z), count(z), m, gradOnly(m, &calls), Options{}, make([]float64, k), info)
	var ce *CollinearError
	if !errors.As(err, &ce) {
		t.Errorf("collinear columns: got %v", err)
	}
}

// TestSampleInfo: with the whole data as the sample and scale 1,
// SampleInfo is the information naiveMoments computes at the same
// coefficients (converted to the standardised scale), to rounding; with a
// scale it is that many times larger. Common practice: two
// implementations of one sum.
func TestSampleInfo(t *testing.T) {
	x, names, z := fair(t)
	c, inv := meanSD(x)
	k := len(names) + 1
	coef := make([]float64, k)
	coef[0] = -1.5
	for j := 1; j < k; j++ {
		coef[j] = 0.1 * math.Pow(-1, float64(j)) / float64(j)
	}
	d := &design{names: names, center: c, invScale: inv, n: len(z), k: k}
	want, _, _, _, _ := naiveMoments(x, z, c, inv)(d.standardised(coef))
	got := SampleInfo(x, coef, c, inv, 3)
	for a := range k {
		for b := a; b < k; b++ {
			if e := math.Abs(got[a*k+b]-3*want[a*k+b]) / math.Abs(3*want[a*k+b]); !(e <= 1e-10) {
				t.Errorf("info[%d,%d] = %.15g, want %.15g", a, b, got[a*k+b], 3*want[a*k+b])
			}
		}
	}
	back := d.original(d.standardised(coef))
	for j := range coef {
		if math.Abs(back[j]-coef[j]) > 1e-12*(1+math.Abs(coef[j])) {
			t.Errorf("original(standardised(coef))[%d] = %.15g, want %.15g", j, back[j], coef[j])
		}
	}
}
