package effect

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

func meanStat(x []float64) func(idx []int) (float64, error) {
	return func(idx []int) (float64, error) {
		var s float64
		for _, i := range idx {
			s += x[i]
		}
		return s / float64(len(idx)), nil
	}
}

func sample(n int, seed uint64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 1))
	x := make([]float64, n)
	for i := range x {
		x[i] = rng.ExpFloat64()
	}
	return x
}

// The result depends on seed and reps only, not on the number of workers
// (each replicate has its own PCG stream).
func TestBootstrapDeterministic(t *testing.T) {
	x := sample(50, 7)
	var first BootResult
	for k, workers := range []int{1, 2, 5, 0} {
		r, err := Bootstrap(len(x), 300, 42, workers, meanStat(x))
		if err != nil {
			t.Fatal(err)
		}
		if k == 0 {
			first = r
		} else if r != first {
			t.Errorf("workers %d: %+v, workers 1: %+v", workers, r, first)
		}
	}
	other, _ := Bootstrap(len(x), 300, 43, 1, meanStat(x))
	if other.SE == first.SE {
		t.Error("a different seed gave the same SE")
	}
}

// For the mean, the ideal (B → ∞) bootstrap SE is the plug-in σ̂/√n with
// σ̂² = Σ(x − x̄)²/n (Efron & Tibshirani 1993, An Introduction to the
// Bootstrap, §6.2, from memory). With B = 2000 the Monte Carlo relative
// error of the SE is about 1/√(2B) ≈ 1.6%; tolerance 6%.
func TestBootstrapMeanSE(t *testing.T) {
	x := sample(80, 11)
	var m, ss float64
	for _, v := range x {
		m += v
	}
	m /= float64(len(x))
	for _, v := range x {
		ss += (v - m) * (v - m)
	}
	ideal := math.Sqrt(ss/float64(len(x))) / math.Sqrt(float64(len(x)))
	r, err := Bootstrap(len(x), 2000, 1, 0, meanStat(x))
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(r.SE/ideal-1) > 0.06 {
		t.Errorf("bootstrap SE %v, ideal %v", r.SE, ideal)
	}
	if r.Estimate != m || !(r.PercentileLow < m && m < r.PercentileHigh) ||
		math.Abs(r.NormalHigh-(m+ZCrit*r.SE)) > 1e-15 {
		t.Errorf("%+v (mean %v)", r, m)
	}
}

// Failed replicates are dropped and counted; an error on the full sample
// is returned.
func TestBootstrapFailures(t *testing.T) {
	x := sample(10, 3)
	flaky := func(idx []int) (float64, error) {
		if idx[0] == 0 && idx[1] != 1 { // never true for the original sample
			return 0, errors.New("empty arm")
		}
		return meanStat(x)(idx)
	}
	r, err := Bootstrap(len(x), 500, 5, 2, flaky)
	if err != nil {
		t.Fatal(err)
	}
	// P(idx[0] = 0) = 1/10, so about 50 failures.
	if r.Failed == 0 || r.Failed+r.Reps != 500 || r.Failed > 100 {
		t.Errorf("failed %d, reps %d", r.Failed, r.Reps)
	}
	bad := func([]int) (float64, error) { return 0, errors.New("no") }
	if _, err := Bootstrap(5, 10, 1, 1, bad); err == nil {
		t.Error("failing statistic: no error")
	}
}

func BenchmarkBootstrapMean(b *testing.B) {
	x := sample(1000, 2)
	for b.Loop() {
		if _, err := Bootstrap(len(x), 200, 1, 0, meanStat(x)); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*200), "ns/replicate")
}
