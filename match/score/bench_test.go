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

// BenchmarkMomentsDrivers counts the passes over the data of the two
// moments-only drivers on 400,000 seeded units with 25 design columns,
// seeded from a fit on every 20th unit (a 20,000-unit sample, as
// warehouse-scale mode samples ~100,000 of 2 million): Newton's method
// (FitMomentsFrom, a full pass per step) and the chord iteration
// (FitMomentsChord, gradient passes and one full pass). In a warehouse a
// full pass costs 5–8 gradient passes at this width; here both kinds run
// the same naive loop, so the time is not the point — the pass counts
// are.
func BenchmarkMomentsDrivers(b *testing.B) {
	x, names, z := synth(2027, 400_000, 20, 6, -1, 0.1)
	c, inv := meanSD(x)
	sx, sz := subsample(x, z, 20)
	seed, err := FitModel(sx, names, sz, Options{})
	if err != nil {
		b.Fatal(err)
	}
	info := SampleInfo(sx, seed.Coef, c, inv, float64(len(z))/float64(len(sz)))
	m := naiveMoments(x, z, c, inv)
	for _, driver := range []string{"newton", "chord"} {
		b.Run(driver, func(b *testing.B) {
			var full, grads int
			for b.Loop() {
				full, grads = 0, 0
				var err error
				if driver == "newton" {
					_, _, err = FitMomentsFrom(names, c, inv, len(z), count(z), countFull(m, &full), Options{}, seed.Coef)
				} else {
					_, _, _, err = FitMomentsChord(names, c, inv, len(z), count(z), countFull(m, &full), gradOnly(m, &grads), Options{}, seed.Coef, info)
				}
				if err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(full), "full-passes")
			b.ReportMetric(float64(grads), "gradient-passes")
		})
	}
}
