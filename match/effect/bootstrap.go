package effect

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sort"
	"sync"
)

// BootResult summarises a nonparametric bootstrap of one statistic.
type BootResult struct {
	// Estimate is the statistic on the original sample (idx = 0..n−1).
	Estimate float64
	// SE is the standard deviation (divisor B−1) of the B successful
	// replicates.
	SE float64
	// PercentileLow and PercentileHigh are the 2.5% and 97.5% quantiles of
	// the replicates (linear interpolation, Hyndman & Fan type 7).
	PercentileLow, PercentileHigh float64
	// NormalLow and NormalHigh are Estimate ∓ ZCrit·SE.
	NormalLow, NormalHigh float64
	// Reps counts successful replicates and Failed those whose statistic
	// returned an error or a non-finite value; they are left out.
	Reps, Failed int
}

// Bootstrap resamples n units with replacement reps times and summarises
// the replicates of stat (Efron & Tibshirani 1993, An Introduction to the
// Bootstrap, ch. 6 and 13: bootstrap standard error and percentile
// interval). stat receives the resampled unit indices (length n, values in
// [0, n)) and returns the statistic; for a matched sample resample the
// matched sets, not the rows, by letting the indices name sets.
//
// Replicate r draws its indices from its own PCG stream seeded with
// (seed, r), so the result depends only on seed and reps, never on workers
// or scheduling; workers goroutines (≤ 0 means GOMAXPROCS) evaluate
// replicates in parallel, so stat must be safe for concurrent use and
// must not keep idx.
//
// A replicate whose statistic fails (for example an arm left empty) is
// dropped and counted in Failed, which callers should report: many
// failures bias the interval. An error on the original sample, or fewer
// than two successful replicates, is an error. n < 1 or reps < 2 panics.
func Bootstrap(n, reps int, seed uint64, workers int, stat func(idx []int) (float64, error)) (BootResult, error) {
	if n < 1 || reps < 2 {
		panic(fmt.Sprintf("effect: bootstrap: n = %d, reps = %d; need n ≥ 1 and reps ≥ 2", n, reps))
	}
	idx := make([]int, n)
	for i := range idx {
		idx[i] = i
	}
	est, err := stat(idx)
	if err != nil {
		return BootResult{}, fmt.Errorf("effect: bootstrap: statistic on the original sample: %w", err)
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, reps)
	vals := make([]float64, reps)
	next := make(chan int)
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			ix := make([]int, n)
			for r := range next {
				rng := rand.New(rand.NewPCG(seed, uint64(r)))
				for i := range ix {
					ix[i] = rng.IntN(n)
				}
				v, err := stat(ix)
				if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
					v = math.NaN()
				}
				vals[r] = v
			}
		}()
	}
	for r := range reps {
		next <- r
	}
	close(next)
	wg.Wait()

	res := BootResult{Estimate: est}
	ok := vals[:0:0]
	for _, v := range vals {
		if math.IsNaN(v) {
			res.Failed++
		} else {
			ok = append(ok, v)
		}
	}
	res.Reps = len(ok)
	if res.Reps < 2 {
		return res, fmt.Errorf("effect: bootstrap: %d of %d replicates failed; fewer than 2 left", res.Failed, reps)
	}
	// Mean and SD in replicate order: the same sums whatever the schedule.
	var m float64
	for _, v := range ok {
		m += v
	}
	m /= float64(res.Reps)
	var ss float64
	for _, v := range ok {
		ss += (v - m) * (v - m)
	}
	res.SE = math.Sqrt(ss / float64(res.Reps-1))
	sort.Float64s(ok)
	res.PercentileLow = quantile7(ok, 0.025)
	res.PercentileHigh = quantile7(ok, 0.975)
	res.NormalLow = est - ZCrit*res.SE
	res.NormalHigh = est + ZCrit*res.SE
	return res, nil
}

// quantile7 is the p-quantile of sorted xs by Hyndman & Fan (1996, Am Stat
// 50:361) type 7.
func quantile7(xs []float64, p float64) float64 {
	h := float64(len(xs)-1) * p
	k := int(math.Floor(h))
	if k >= len(xs)-1 {
		return xs[len(xs)-1]
	}
	return xs[k] + (h-float64(k))*(xs[k+1]-xs[k])
}
