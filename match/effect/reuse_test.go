package effect

import (
	"math"
	"testing"
)

// Hand-worked example of the Abadie & Imbens (2006, Econometrica 74:235)
// formulas with fixed M = 2, written with their K_M(j)(K_M(j)−1)/M²
// (formula from memory), independently of the k/q form in ReuseVariance.
// Treated 0,1,2 (Y 5,7,6); controls 3,4,5 (Y 4,3,6); sets {3,4}, {3,4},
// {3,5}; K_M = 3, 2, 1. Contrasts 1.5, 3.5, 1 so τ̂ = 2.
func TestReuseVarianceHandWorked(t *testing.T) {
	y := []float64{5, 7, 6, 4, 3, 6}
	sigma2 := []float64{1, 2, 3, 0.5, 1.5, 2.5}
	treated := []int{0, 1, 2}
	controls := [][]int{{3, 4}, {3, 4}, {3, 5}}
	r, err := ReuseVariance(y, treated, controls, sigma2)
	if err != nil {
		t.Fatal(err)
	}
	const m = 2.0
	km := []float64{3, 2, 1}
	sc := sigma2[3:]
	var ve, vp float64
	for j := range km {
		ve += (km[j] / m) * (km[j] / m) * sc[j]
		vp += km[j] * (km[j] - 1) / (m * m) * sc[j]
	}
	ve = (1 + 2 + 3 + ve) / 9
	vp = (0.25 + 2.25 + 1 + vp) / 9
	if r.Estimate != 2 || !near(r.VarSample, ve, 1e-15) || !near(r.VarPopulation, vp, 1e-15) {
		t.Errorf("τ̂ %v V_E %v V_P %v, want 2 %v %v", r.Estimate, r.VarSample, r.VarPopulation, ve, vp)
	}
	// The same numbers in closed form: 9.25/9 and 5/9.
	if !near(r.VarSample, 9.25/9, 1e-15) || !near(r.VarPopulation, 5.0/9, 1e-15) {
		t.Errorf("V_E %v V_P %v, want 9.25/9 5/9", r.VarSample, r.VarPopulation)
	}
	if r.NTreated != 3 || r.NControl != 3 || !near(r.SESample, math.Sqrt(9.25/9), 1e-15) {
		t.Errorf("counts %d/%d SE %v", r.NTreated, r.NControl, r.SESample)
	}
}

// Without reuse and M = 1 the sample variance is that of N₁ independent
// pair differences, (1/N₁²)·Σ(σ²_t + σ²_c) (common practice), and the
// population correction vanishes (K_M = 1).
func TestReuseVarianceNoReuse(t *testing.T) {
	y := []float64{2, 4, 1, 3}
	sigma2 := []float64{1, 2, 3, 4}
	r, err := ReuseVariance(y, []int{0, 1}, [][]int{{2}, {3}}, sigma2)
	if err != nil {
		t.Fatal(err)
	}
	// Contrasts 1 and 1: τ̂ = 1 and no spread.
	if r.Estimate != 1 || !near(r.VarSample, 10.0/4, 1e-15) || r.VarPopulation != 0 {
		t.Errorf("%+v", r)
	}
}

// σ̂² = J/(J+1)·(Y_i − mean of neighbours)² (Abadie & Imbens 2006, from
// memory): J = 1, (1−3)²/2 = 2; J = 2, (2/3)(1−4)² = 6.
func TestConditionalVariance(t *testing.T) {
	y := []float64{1, 3, 5}
	got := ConditionalVariance(y, [][]int{{1}, {0, 2}, nil})
	if got[0] != 2 || !near(got[1], 0, 0) || !math.IsNaN(got[2]) {
		t.Errorf("%v", got)
	}
	got = ConditionalVariance(y, [][]int{{1, 2}, {0}, {1}})
	if !near(got[0], 6, 1e-15) || got[1] != 2 || got[2] != 2 {
		t.Errorf("%v", got)
	}
}

func TestReuseVarianceErrors(t *testing.T) {
	y := []float64{1, 2, math.NaN()}
	s := []float64{1, 1, 1}
	tests := []struct {
		name     string
		treated  []int
		controls [][]int
		sigma2   []float64
	}{
		{"no sets", nil, nil, s},
		{"empty set", []int{0}, [][]int{{}}, s},
		{"out of range", []int{0}, [][]int{{5}}, s},
		{"NaN outcome", []int{0}, [][]int{{2}}, s},
		{"NaN variance", []int{0}, [][]int{{1}}, []float64{1, math.NaN(), 1}},
	}
	for _, tc := range tests {
		if _, err := ReuseVariance(y, tc.treated, tc.controls, tc.sigma2); err == nil {
			t.Errorf("%s: no error", tc.name)
		}
	}
}
