package effect

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sort"
	"sync"

	"counterpart/match/weights"
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
	rs, err := BootstrapMany(n, reps, seed, workers, 1, func() func([]int, []float64) error {
		return func(ix []int, out []float64) error {
			v, err := stat(ix)
			out[0] = v
			return err
		}
	})
	if len(rs) == 0 {
		return BootResult{}, err
	}
	res := rs[0]
	res.Estimate = est
	if err != nil {
		return res, err
	}
	res.NormalLow = est - ZCrit*res.SE
	res.NormalHigh = est + ZCrit*res.SE
	return res, nil
}

// BootstrapMany is Bootstrap for k statistics computed together from each
// resample (say, one refitted score and the effect of every outcome under
// every scheme). newStat is called once per worker and returns that
// worker's statistic, so it may keep buffers between replicates; the
// statistic fills out (length k) from the resampled indices. A replicate
// whose statistic fails, or yields a non-finite value in any component,
// is dropped from every component and counted in Failed. The results
// carry SE, percentile bounds, Reps and Failed; Estimate and the normal
// bounds are NaN (the caller holds the estimate on the original sample).
//
// Replicate r draws its indices from the PCG stream (seed, r), and the
// summaries are sums over the sorted replicates, so the results depend on
// seed and reps only, never on workers or scheduling. Fewer than two
// successful replicates is an error. n < 1, reps < 2 or k < 1 panics.
func BootstrapMany(n, reps int, seed uint64, workers, k int, newStat func() func(idx []int, out []float64) error) ([]BootResult, error) {
	if n < 1 || reps < 2 || k < 1 {
		panic(fmt.Sprintf("effect: bootstrap: n = %d, reps = %d, k = %d; need n ≥ 1, reps ≥ 2 and k ≥ 1", n, reps, k))
	}
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, reps)
	vals := make([][]float64, reps) // vals[r] is nil for a failed replicate
	next := make(chan int)
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			stat := newStat()
			ix := make([]int, n)
			for r := range next {
				rng := rand.New(rand.NewPCG(seed, uint64(r)))
				for i := range ix {
					ix[i] = rng.IntN(n)
				}
				out := make([]float64, k)
				if err := stat(ix, out); err != nil {
					continue
				}
				finite := true
				for _, v := range out {
					finite = finite && !math.IsNaN(v) && !math.IsInf(v, 0)
				}
				if finite {
					vals[r] = out
				}
			}
		}()
	}
	for r := range reps {
		next <- r
	}
	close(next)
	wg.Wait()

	failed := 0
	for _, v := range vals {
		if v == nil {
			failed++
		}
	}
	res := make([]BootResult, k)
	for c := range res {
		res[c] = BootResult{Estimate: math.NaN(), NormalLow: math.NaN(), NormalHigh: math.NaN(), Reps: reps - failed, Failed: failed}
	}
	if reps-failed < 2 {
		return res, fmt.Errorf("effect: bootstrap: %d of %d replicates failed; fewer than 2 left", failed, reps)
	}
	for c := range res {
		v := make([]float64, 0, reps-failed)
		for _, out := range vals {
			if out != nil {
				v = append(v, out[c])
			}
		}
		sort.Float64s(v)
		var m float64
		for _, x := range v {
			m += x
		}
		m /= float64(len(v))
		var ss float64
		for _, x := range v {
			ss += (x - m) * (x - m)
		}
		res[c].SE = math.Sqrt(ss / float64(len(v)-1))
		res[c].PercentileLow = weights.Percentile(v, 2.5)
		res[c].PercentileHigh = weights.Percentile(v, 97.5)
	}
	return res, nil
}
