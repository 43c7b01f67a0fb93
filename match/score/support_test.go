package score

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestCStatisticBruteForce: the c-statistic is the Mann–Whitney probability
// P(score_T > score_C) + ½ P(tie) (Hanley & McNeil 1982); check the
// sort-and-merge form against counting every pair, ties included.
func TestCStatisticBruteForce(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	for rep := 0; rep < 200; rep++ {
		n := 2 + r.IntN(60)
		ps := make([]float64, n)
		z := make([]bool, n)
		for i := range ps {
			ps[i] = math.Round(r.Float64()*8) / 8 // many ties
			z[i] = r.Float64() < 0.4
		}
		z[0], z[1] = true, false
		var wins, pairs float64
		for i := range ps {
			for j := range ps {
				if z[i] && !z[j] {
					pairs++
					switch {
					case ps[i] > ps[j]:
						wins++
					case ps[i] == ps[j]:
						wins += 0.5
					}
				}
			}
		}
		if got, want := CStatistic(ps, z), wins/pairs; math.Abs(got-want) > 1e-12 {
			t.Fatalf("rep %d: CStatistic %v, brute force %v", rep, got, want)
		}
	}
}
