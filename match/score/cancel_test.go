package score

import (
	"errors"
	"math/rand/v2"
	"sync/atomic"
	"testing"
)

// TestFitModelCheck checks that Options.Check stops a fit at the first
// chunk after it starts failing, returning its error as is, and that
// OnPass sees every accepted Newton step in order.
func TestFitModelCheck(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	const n = 3 * blockRows
	x := [][]float64{make([]float64, n), make([]float64, n)}
	z := make([]bool, n)
	for i := range z {
		x[0][i], x[1][i] = r.NormFloat64(), r.NormFloat64()
		z[i] = r.Float64() < logistic(0.5*x[0][i]-0.3*x[1][i])
	}
	stop := errors.New("stop")
	for _, tc := range []struct {
		name      string
		failAfter int // checks that pass before Check fails; -1 never
		wantErr   bool
	}{
		{"never", -1, false},
		{"first chunk", 0, true},
		{"second pass", n / chunkRows, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var calls atomic.Int64
			var passes []int
			opt := Options{
				Check: func() error {
					if c := calls.Add(1); tc.failAfter >= 0 && c > int64(tc.failAfter) {
						return stop
					}
					return nil
				},
				OnPass: func(p int, _ float64) { passes = append(passes, p) },
			}
			fit, err := FitModel(x, []string{"a", "b"}, z, opt)
			if tc.wantErr {
				if !errors.Is(err, stop) || fit != nil {
					t.Fatalf("got fit %v, err %v; want the Check error and no fit", fit != nil, err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if len(passes) != fit.Iterations {
				t.Fatalf("OnPass saw %d passes, the fit took %d", len(passes), fit.Iterations)
			}
			for i, p := range passes {
				if p != i+1 {
					t.Fatalf("OnPass passes %v: want 1, 2, …", passes)
				}
			}
		})
	}
}

// TestChunkLen checks that narrow designs keep the historical chunk (so
// their results do not move) and wide ones get chunks that bound the
// work between two cancellation checks.
func TestChunkLen(t *testing.T) {
	for _, tc := range []struct{ k, want int }{
		{2, chunkRows}, {100, chunkRows}, {362, chunkRows}, {363, chunkRows / 2}, {5005, 8},
	} {
		if got := chunkLen(tc.k); got != tc.want {
			t.Errorf("chunkLen(%d) = %d, want %d", tc.k, got, tc.want)
		}
	}
}
