package score

import (
	"testing"
	"time"
)

// BenchmarkFit1M fits a logistic model to 1,000,000 seeded units with 20
// numeric columns (one log-normal, the rest N(0,1)) and a 6-level category
// (5 dummy columns): the scale of a large health-plan cohort. Compare with
// testdata/score/bench_statsmodels.py on the same design.
func BenchmarkFit1M(b *testing.B) {
	x, names, z := synth(2026, 1_000_000, 20, 6, -1, 0.1)
	if len(x) != 25 {
		b.Fatalf("%d columns, want 25", len(x))
	}
	var iters int
	var elapsed time.Duration
	for b.Loop() {
		start := time.Now()
		fit, err := FitModel(x, names, z, Options{})
		elapsed += time.Since(start)
		if err != nil {
			b.Fatal(err)
		}
		iters = fit.Iterations
	}
	s := elapsed.Seconds() / float64(b.N)
	b.ReportMetric(s, "s/fit")
	b.ReportMetric(float64(iters), "iterations")
	// One pass over the data per Newton step plus the first one.
	b.ReportMetric(s/float64(iters+1), "s/pass")
}
