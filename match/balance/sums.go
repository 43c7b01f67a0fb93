package balance

import "math"

// SumsCovariate is one covariate of FromSums: a categorical one with its
// levels, a numeric one with the shift K its sums are taken around.
type SumsCovariate struct {
	Name        string
	Categorical bool
	Levels      []string
	Shift       float64
}

// ArmSums are one adjustment's sums in one arm: Σw, Σw², then per
// covariate Σw·δ and Σw·δ² (δ = x − K) when numeric, Σw·[x = l] per level
// when categorical.
type ArmSums struct {
	W, W2 float64
	Terms []float64
}

// FromSums computes balance statistics from one pass's sums (arms[a][g],
// g = 0 comparison, 1 treated), with the definitions of the balance_history view (Austin 2009;
// Austin & Stuart 2015; sql/common/balance_view.sql), keyed by
// adjustment (adjs, in RunSums order):
//
//	mean  m = Σw·x / Σw
//	var   v = Σw·(x − m)² / (Σw − Σw²/Σw)   (for a level
//	      Σw·x − (Σw·x)²/Σw in the numerator, exactly equal for 0/1)
//	smd   (m_T − m_C)/d, d the unadjusted pooled SD: √((v_T + v_C)/2), or
//	      √((p_T(1−p_T) + p_C(1−p_C))/2) for a level; NaN when d = 0
//	ratio v_T / v_C, NaN when v_C = 0
//
// NaN stands where the view has NULL (an arm with no weight).
func FromSums(covs []SumsCovariate, arms [][2]ArmSums, adjs []string) map[string][]Stat {
	na := len(adjs)
	// sums[a][arm] holds adjustment a's Σw, Σw², then the covariates' sums.
	sums := make([][2][]float64, na)
	for a := range na {
		for g := range 2 {
			sums[a][g] = append([]float64{arms[a][g].W, arms[a][g].W2}, arms[a][g].Terms...)
		}
	}
	out := map[string][]Stat{}
	stat := func(name, level string, binary bool, m, v [2]float64, d2 float64) Stat {
		st := Stat{Name: name, Level: level, Binary: binary, MeanT: m[1], MeanC: m[0],
			SDT: math.Sqrt(math.Max(v[1], 0)), SDC: math.Sqrt(math.Max(v[0], 0)), SMD: math.NaN(), VarRatio: math.NaN()}
		if math.IsNaN(v[1]) {
			st.SDT = math.NaN()
		}
		if math.IsNaN(v[0]) {
			st.SDC = math.NaN()
		}
		if d2 > 0 {
			st.SMD = (m[1] - m[0]) / math.Sqrt(d2)
		}
		if v[0] != 0 && !math.IsNaN(v[0]) {
			st.VarRatio = v[1] / v[0]
		}
		return st
	}
	// den is the reliability-weight denominator Σw − Σw²/Σw; NaN (the
	// view's NULL) when it or Σw is 0.
	den := func(a, g int) float64 {
		sw := sums[a][g][0]
		d := sw - sums[a][g][1]/sw
		if sw == 0 || d == 0 {
			return math.NaN()
		}
		return d
	}
	pos := 2
	for _, cv := range covs {
		if !cv.Categorical {
			var d2 float64
			for a := range na {
				var m, v [2]float64
				for g := range 2 {
					sw, sd, sdd := sums[a][g][0], sums[a][g][pos], sums[a][g][pos+1]
					if sw == 0 {
						m[g], v[g] = math.NaN(), math.NaN()
						continue
					}
					m[g] = cv.Shift + sd/sw
					v[g] = (sdd - sd*sd/sw) / den(a, g)
				}
				if a == 0 {
					d2 = (v[0] + v[1]) / 2
				}
				out[adjs[a]] = append(out[adjs[a]], stat(cv.Name, "", false, m, v, d2))
			}
			pos += 2
			continue
		}
		for _, l := range cv.Levels {
			var d2 float64
			for a := range na {
				var m, v [2]float64
				for g := range 2 {
					sw, n := sums[a][g][0], sums[a][g][pos]
					if sw == 0 {
						m[g], v[g] = math.NaN(), math.NaN()
						continue
					}
					m[g] = n / sw
					v[g] = (n - n*n/sw) / den(a, g)
				}
				if a == 0 {
					d2 = (m[1]*(1-m[1]) + m[0]*(1-m[0])) / 2
				}
				out[adjs[a]] = append(out[adjs[a]], stat(cv.Name, l, true, m, v, d2))
			}
			pos++
		}
	}
	return out
}
