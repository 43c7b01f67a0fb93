package assign

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"testing"
)

// logitScores draws logit propensity scores, treated ~ N(0.5, 1) and
// controls ~ N(-0.5, 1) (a typical moderate-overlap design, common
// practice in simulation studies), and returns the caliper 0.2 x pooled SD
// of the logit (Austin 2011, Pharm Stat 10:150).
func logitScores(nt, nc int, seed uint64) ([]float64, []bool, float64) {
	r := rand.New(rand.NewPCG(seed, 1))
	score := make([]float64, nt+nc)
	treated := make([]bool, nt+nc)
	var s1, q1, s0, q0 float64
	for i := range score {
		treated[i] = i < nt
		if treated[i] {
			score[i] = 0.5 + r.NormFloat64()
			s1, q1 = s1+score[i], q1+score[i]*score[i]
		} else {
			score[i] = -0.5 + r.NormFloat64()
			s0, q0 = s0+score[i], q0+score[i]*score[i]
		}
	}
	r.Shuffle(len(score), func(i, j int) {
		score[i], score[j] = score[j], score[i]
		treated[i], treated[j] = treated[j], treated[i]
	})
	v1 := q1/float64(nt) - (s1/float64(nt))*(s1/float64(nt))
	v0 := q0/float64(nc) - (s0/float64(nc))*(s0/float64(nc))
	return score, treated, 0.2 * math.Sqrt((v1+v0)/2)
}

// report adds the certificate and the heap growth of one call.
func report(b *testing.B, cert Certificate, heap uint64) {
	b.ReportMetric(float64(cert.Edges), "edges")
	b.ReportMetric(float64(cert.Rounds), "rounds")
	b.ReportMetric(float64(heap)/(1<<20), "MB-alloc")
	if !cert.Certified {
		b.Fatalf("not certified: %+v", cert)
	}
}

func allocated() uint64 {
	var m runtime.MemStats
	runtime.ReadMemStats(&m)
	return m.TotalAlloc
}

// BenchmarkOptimal: 1:1 optimal matching, caliper 0.2 pooled SD, one
// treated per ten controls, n = total units.
func BenchmarkOptimal(b *testing.B) {
	for _, n := range []int{11_000, 22_000, 55_000, 110_000, 220_000} {
		nt := n / 11
		score, treated, cal := logitScores(nt, n-nt, 1)
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			for b.Loop() {
				a := allocated()
				_, cert, err := Optimal(score, treated, nil, nil, Options{Controls: 1, Caliper: cal})
				if err != nil {
					b.Fatal(err)
				}
				report(b, cert, allocated()-a)
			}
		})
	}
}

// BenchmarkFull: full matching, caliper 0.2 pooled SD, one treated per
// four controls, no ratio bounds.
func BenchmarkFull(b *testing.B) {
	for _, n := range []int{10_000, 20_000, 50_000, 100_000} {
		nt := n / 5
		score, treated, cal := logitScores(nt, n-nt, 2)
		b.Run(fmt.Sprintf("n=%d", n), func(b *testing.B) {
			for b.Loop() {
				a := allocated()
				_, cert, err := Full(score, treated, nil, nil, FullOptions{Caliper: cal})
				if err != nil {
					b.Fatal(err)
				}
				report(b, cert, allocated()-a)
			}
		})
	}
}
