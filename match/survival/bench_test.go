package survival

import (
	"math"
	"math/rand/v2"
	"testing"
)

// benchData is a 1,000,000-row cohort with integer-day follow-up (heavy
// ties, as claims data have), estimated weights and matched sets of 4.
func benchData(n int) (Data, RateData) {
	rng := rand.New(rand.NewPCG(1, 2))
	d := Data{Time: make([]float64, n), Event: make([]bool, n), Treated: make([]bool, n), Weight: make([]float64, n), Cluster: make([]int, n)}
	r := RateData{Count: make([]float64, n), Exposure: make([]float64, n), Treated: d.Treated, Weight: d.Weight, Cluster: d.Cluster}
	for i := 0; i < n; i++ {
		z := rng.IntN(2) == 1
		lam := 0.002
		if z {
			lam *= 0.8
		}
		te := math.Ceil(rng.ExpFloat64() / lam)
		tc := math.Min(math.Ceil(rng.ExpFloat64()/0.001), 1095)
		d.Time[i], d.Event[i], d.Treated[i] = math.Min(te, tc), te <= tc, z
		d.Weight[i] = 0.5 + rng.Float64()
		d.Cluster[i] = i / 4
		r.Exposure[i] = 1 + float64(rng.IntN(36))
		r.Count[i] = float64(rng.IntN(3))
	}
	return d, r
}

// BenchmarkMillionRows times the three estimators on 1,000,000 rows:
// Kaplan–Meier with three horizons (Greenwood and clustered robust SEs),
// the Efron Cox fit with robust and cluster SEs and the PH check, and the
// rate fit.
func BenchmarkMillionRows(b *testing.B) {
	const n = 1_000_000
	d, r := benchData(n)
	b.Run("kaplan-meier", func(b *testing.B) {
		for b.Loop() {
			if _, err := KaplanMeier(d, []float64{90, 365, 730}); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/n, "ns/row")
	})
	b.Run("cox-efron", func(b *testing.B) {
		for b.Loop() {
			if _, err := Cox(d, Efron); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/n, "ns/row")
	})
	b.Run("rates", func(b *testing.B) {
		for b.Loop() {
			if _, err := Rates(r, 1000); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/n, "ns/row")
	})
}
