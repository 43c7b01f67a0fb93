package warehousetest

import (
	"fmt"
	"math"
	"testing"
	"time"

	"counterpart/warehouse"
)

// wstats is the weighted mean and variance the balance view must report,
// written straight from the definitions in the one-pass form (the view
// uses a second pass; both are equal in exact arithmetic):
//
//	m = Σw·x / Σw
//	v = (Σw·x² − (Σw·x)²/Σw) / (Σw − Σw²/Σw)
//
// (reliability weights: v is the n−1 sample variance when every w is 1).
// Units with weight 0 add nothing to any sum, so they are excluded as the
// definitions require. v is NaN (NULL) when its denominator is 0.
func wstats(x, w []float64, keep []bool) (m, v float64) {
	var sw, sww, swx, swxx float64
	for i := range x {
		if !keep[i] || w[i] == 0 {
			continue
		}
		sw += w[i]
		sww += w[i] * w[i]
		swx += w[i] * x[i]
		swxx += w[i] * x[i] * x[i]
	}
	m = swx / sw
	den := sw - sww/sw
	if den == 0 {
		return m, math.NaN()
	}
	return m, (swxx - swx*swx/sw) / den
}

type balanceRow struct {
	meanT, meanC, sdT, sdC, smd, ratio float64
}

// expectedBalance computes every row of the balance view for the hand data
// with the definitions of Austin (2009), Stat Med 28:3083 (SMD of a
// continuous covariate: (m_T − m_C)/√((s_T² + s_C²)/2); of a binary one:
// (p_T − p_C)/√((p_T(1−p_T) + p_C(1−p_C))/2)) and Austin & Stuart (2015),
// Stat Med 34:3661 (after adjustment the denominator stays the unadjusted
// one).
func expectedBalance() map[string]balanceRow {
	treated := []bool{true, true, true, false, false, false, false}
	control := []bool{false, false, false, true, true, true, true}
	vars := []struct {
		cov, level string
		x          []float64
	}{
		{"age", "", []float64{60, 70, 80, 50, 60, 70, 40}},
		{"const1", "", []float64{1, 1, 1, 1, 1, 1, 1}},
		{"sex", "F", []float64{1, 0, 1, 0, 0, 1, 0}},
		{"sex", "M", []float64{0, 1, 0, 1, 1, 0, 1}},
	}
	adjustments := []struct {
		name string
		w    []float64
	}{
		{"unadjusted", []float64{1, 1, 1, 1, 1, 1, 1}},
		// Σ set_weight per unit over handMatches; unit 7 is in no set.
		{"matched", []float64{1, 1, 1, 0.5, 1, 0.5 + 1, 0}},
		{"att", handWeights[0]},
		{"solo", handWeights[1]},
	}
	rows := map[string]balanceRow{}
	for _, v := range vars {
		mT0, vT0 := wstats(v.x, adjustments[0].w, treated)
		mC0, vC0 := wstats(v.x, adjustments[0].w, control)
		d2 := (vT0 + vC0) / 2
		if v.level != "" {
			d2 = (mT0*(1-mT0) + mC0*(1-mC0)) / 2
		}
		for _, a := range adjustments {
			mT, vT := wstats(v.x, a.w, treated)
			mC, vC := wstats(v.x, a.w, control)
			r := balanceRow{meanT: mT, meanC: mC, sdT: math.Sqrt(vT), sdC: math.Sqrt(vC),
				smd: math.NaN(), ratio: math.NaN()}
			if d2 > 0 {
				r.smd = (mT - mC) / math.Sqrt(d2)
			}
			if vC != 0 && !math.IsNaN(vC) {
				r.ratio = vT / vC
			}
			rows[v.cov+"|"+v.level+"|"+a.name] = r
		}
	}
	return rows
}

func testBalance(t *testing.T, e Engine) {
	// Hand-worked anchors for the helper above (Austin 2009 formulas):
	// age, unadjusted: treated 60, 70, 80 → mean 70, variance 100; controls
	// 50, 60, 70, 40 → mean 55, variance (25+25+225+225)/3 = 500/3; pooled
	// SD √((100 + 500/3)/2) = √(400/3); SMD 15/√(400/3); ratio 0.6.
	// age, matched: control weights ½, 1, 1½ on 50, 60, 70 → mean 190/3,
	// Σw(x−m)² = 1500/9, Σw − Σw²/Σw = 3 − 3.5/3 = 5.5/3 → variance
	// 1500/16.5; SMD (70 − 190/3)/√(400/3); ratio 1.1.
	// sex = F, unadjusted: p_T = 2/3, p_C = 1/4 → SMD
	// (2/3 − 1/4)/√((2/9 + 3/16)/2), variances 1/3 and 1/4.
	want := expectedBalance()
	for key, r := range map[string]balanceRow{
		"age||unadjusted": {70, 55, 10, math.Sqrt(500.0 / 3), 15 / math.Sqrt(400.0/3), 0.6},
		"age||matched":    {70, 190.0 / 3, 10, math.Sqrt(1500 / 16.5), (70 - 190.0/3) / math.Sqrt(400.0/3), 1.1},
		"sex|F|unadjusted": {2.0 / 3, 0.25, math.Sqrt(1.0 / 3), 0.5,
			(2.0/3 - 0.25) / math.Sqrt((2.0/9+3.0/16)/2), (1.0 / 3) / 0.25},
	} {
		if err := closeRow(want[key], r); err != "" {
			t.Fatalf("test helper disagrees with the hand-worked %s: %s", key, err)
		}
	}

	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	run(t, w, out, publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes), t0)
	check := func(view string) {
		t.Helper()
		rows := e.Query(t, w, "SELECT run_id, covariate, level, adjustment, mean_treated, mean_control, sd_treated, sd_control, smd, variance_ratio FROM "+view)
		if len(rows) != len(want) {
			t.Errorf("%s has %d rows, want %d", view, len(rows), len(want))
		}
		for _, r := range rows {
			level := ""
			if r[2] != nil {
				level = fmt.Sprint(r[2])
			}
			key := fmt.Sprintf("%v|%s|%v", r[1], level, r[3])
			exp, ok := want[key]
			if !ok || r[0] != "r1" {
				t.Errorf("%s: unexpected row %v", view, r)
				continue
			}
			got := balanceRow{num(r[4]), num(r[5]), num(r[6]), num(r[7]), num(r[8]), num(r[9])}
			if err := closeRow(got, exp); err != "" {
				t.Errorf("%s %s: %s", view, key, err)
			}
		}
	}
	check("st_balance")
	check("st_balance_history")

	// A rejected run does not move the balance view.
	run(t, w, out, publication(c, "r2", warehouse.StatusRejected, 1, handSchemes), t0.Add(time.Hour))
	check("st_balance")
}

// closeRow compares to 1e-9 relative (absolute near 0); NaN stands for
// NULL and must match NaN.
func closeRow(got, want balanceRow) string {
	g := []float64{got.meanT, got.meanC, got.sdT, got.sdC, got.smd, got.ratio}
	w := []float64{want.meanT, want.meanC, want.sdT, want.sdC, want.smd, want.ratio}
	names := []string{"mean_treated", "mean_control", "sd_treated", "sd_control", "smd", "variance_ratio"}
	for i := range g {
		if math.IsNaN(g[i]) != math.IsNaN(w[i]) || math.Abs(g[i]-w[i]) > 1e-9*math.Max(1, math.Abs(w[i])) {
			return fmt.Sprintf("%s = %v, want %v", names[i], g[i], w[i])
		}
	}
	return ""
}
