package study

import (
	"context"
	"fmt"
	"math"

	"counterpart/match/balance"
	"counterpart/warehouse"
)

// runSums holds warehouse.RunSumsSQL's one row per arm (index 0 the
// comparison arm, 1 the treated arm; the columns after t), zeros where an
// arm has no row or a sum is NULL.
type runSums struct {
	spec warehouse.RunSums
	arm  [2][]float64
}

// runSumsInWarehouse reads the run's categorical levels from its
// snapshot (BalanceLevelsSQL) and then makes RunSumsSQL's one pass over
// the rows the publish transaction has written.
func runSumsInWarehouse(ctx context.Context, sp warehouse.ScalePublisher, c *warehouse.Contract, runID string, spec warehouse.RunSums) (*runSums, error) {
	spec.Levels = make([][]string, len(spec.Covariates))
	text, err := warehouse.BalanceLevelsSQL(c, spec.Covariates)
	if err != nil {
		return nil, err
	}
	if text != "" {
		rows, err := sp.QueryRows(ctx, text, runID)
		if err != nil {
			return nil, fmt.Errorf("balance levels: %w", err)
		}
		for _, r := range rows {
			i := int(numOf(r[0]))
			if i < 0 || i >= len(spec.Covariates) {
				return nil, fmt.Errorf("balance levels: covariate %d of %d", i, len(spec.Covariates))
			}
			spec.Levels[i] = append(spec.Levels[i], textOf(r[1]))
		}
	}
	text, args, err := warehouse.RunSumsSQL(c, spec, sp.LateralLevels())
	if err != nil {
		return nil, err
	}
	args[0] = runID
	rows, err := sp.QueryRows(ctx, text, args...)
	if err != nil {
		return nil, fmt.Errorf("balance and effect sums: %w", err)
	}
	width := spec.Adjustments()*spec.BalanceWidth() + len(spec.Outcomes)*spec.EffectAdjustments()*warehouse.EffectWidth
	rs := &runSums{spec: spec}
	for _, r := range rows {
		if len(r) != 1+width {
			return nil, fmt.Errorf("balance and effect sums: %d columns, want %d", len(r), 1+width)
		}
		g := 0
		if t, _ := r[0].(bool); t {
			g = 1
		}
		v := make([]float64, width)
		for j := range v {
			if v[j] = numOf(r[1+j]); math.IsNaN(v[j]) {
				v[j] = 0 // NULL: no row in this arm
			}
		}
		rs.arm[g] = v
	}
	for g := range 2 {
		if rs.arm[g] == nil {
			rs.arm[g] = make([]float64, width)
		}
	}
	return rs, nil
}

// balance returns adjustment a's balance sums in arm g: Σw, Σw², then the
// covariates' sums.
func (r *runSums) balance(a, g int) []float64 {
	w := r.spec.BalanceWidth()
	return r.arm[g][a*w : (a+1)*w]
}

// effect returns the effect sums of outcome o under adjustment a (an
// index into the adjustments, never the matched one) in arm g.
func (r *runSums) effect(o, a, g int) armSums {
	if r.spec.Matched && a > 1 {
		a--
	}
	v := r.arm[g][r.spec.Adjustments()*r.spec.BalanceWidth()+(o*r.spec.EffectAdjustments()+a)*warehouse.EffectWidth:]
	return armSums{n: v[0], miss: v[1], sw: v[2], swy: v[3], sw2y2: v[4], sw2y: v[5], sw2: v[6], nonBinary: v[7]}
}

// balanceFromSums computes this run's balance statistics from RunSumsSQL's
// sums, with the definitions of the balance_history view (Austin 2009;
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
func balanceFromSums(rs *runSums, adjs []string) map[string][]balance.Stat {
	na := len(adjs)
	covs, levels, shifts := rs.spec.Covariates, rs.spec.Levels, rs.spec.Shifts
	// sums[a][arm] holds adjustment a's Σw, Σw², then the covariates' sums.
	sums := make([][2][]float64, na)
	for a := range na {
		sums[a] = [2][]float64{rs.balance(a, 0), rs.balance(a, 1)}
	}
	out := map[string][]balance.Stat{}
	stat := func(name, level string, binary bool, m, v [2]float64, d2 float64) balance.Stat {
		st := balance.Stat{Name: name, Level: level, Binary: binary, MeanT: m[1], MeanC: m[0],
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
	pos, k := 2, 0
	for i, cv := range covs {
		if cv.Kind != warehouse.Categorical {
			var d2 float64
			for a := range na {
				var m, v [2]float64
				for g := range 2 {
					sw, sd, sdd := sums[a][g][0], sums[a][g][pos], sums[a][g][pos+1]
					if sw == 0 {
						m[g], v[g] = math.NaN(), math.NaN()
						continue
					}
					m[g] = shifts[k] + sd/sw
					v[g] = (sdd - sd*sd/sw) / den(a, g)
				}
				if a == 0 {
					d2 = (v[0] + v[1]) / 2
				}
				out[adjs[a]] = append(out[adjs[a]], stat(cv.Name, "", false, m, v, d2))
			}
			pos += 2
			k++
			continue
		}
		for _, l := range levels[i] {
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

// balanceShifts returns the shift of each numeric covariate of covs, in
// order, for warehouse.RunSumsSQL: its cohort mean (the design's
// centre), near every arm's mean, which is what the shifted one-pass
// variance needs.
func balanceShifts(d *warehouse.DesignSQL, covs []warehouse.CovariateMeta) []float64 {
	var out []float64
	for _, cv := range covs {
		if cv.Kind == warehouse.Categorical {
			continue
		}
		k := 0.0
		for _, c := range d.Columns {
			if c.Source == cv.Name && !c.Categorical {
				k = c.Center
			}
		}
		out = append(out, k)
	}
	return out
}
