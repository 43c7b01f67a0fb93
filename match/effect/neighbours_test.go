package effect

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestArmNeighboursBruteForce: the sorted-scan neighbours equal the J
// nearest same-arm units found by measuring every pair (the definition in
// Abadie & Imbens 2006, §4, from memory), ties broken by position, and
// units with a missing outcome are neither searched nor returned.
func TestArmNeighboursBruteForce(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 11))
	for rep := 0; rep < 300; rep++ {
		n := 3 + r.IntN(40)
		logit := make([]float64, n)
		z := make([]bool, n)
		y := make([]float64, n)
		for i := range logit {
			logit[i] = math.Round(r.NormFloat64()*4) / 4 // ties
			z[i] = r.Float64() < 0.5
			y[i] = r.Float64()
			if r.Float64() < 0.1 {
				y[i] = math.NaN()
			}
		}
		j := 1 + r.IntN(3)
		got := ArmNeighbours(logit, z, y, j)
		for i := range logit {
			if math.IsNaN(y[i]) {
				if got[i] != nil {
					t.Fatalf("rep %d: unit %d has a missing outcome but neighbours %v", rep, i, got[i])
				}
				continue
			}
			var cand []int
			for k := range logit {
				if k != i && z[k] == z[i] && !math.IsNaN(y[k]) {
					cand = append(cand, k)
				}
			}
			// The j-th nearest distance must match; the set may differ
			// only among units tied at that distance.
			slices.SortStableFunc(cand, func(a, b int) int {
				da, db := math.Abs(logit[a]-logit[i]), math.Abs(logit[b]-logit[i])
				switch {
				case da < db:
					return -1
				case da > db:
					return 1
				}
				return 0
			})
			want := min(j, len(cand))
			if len(got[i]) != want {
				t.Fatalf("rep %d unit %d: %d neighbours, want %d", rep, i, len(got[i]), want)
			}
			for k, u := range got[i] {
				if z[u] != z[i] || u == i || math.IsNaN(y[u]) {
					t.Fatalf("rep %d unit %d: neighbour %d is not a same-arm unit with an outcome", rep, i, u)
				}
				if k == len(got[i])-1 {
					d := math.Abs(logit[u] - logit[i])
					if dw := math.Abs(logit[cand[want-1]] - logit[i]); d != dw {
						t.Fatalf("rep %d unit %d: farthest neighbour at %v, brute force %v", rep, i, d, dw)
					}
				}
			}
		}
	}
}
