package sensitivity

import (
	"math"
	"testing"
)

// Rare outcome: HR is read as RR, so VanderWeele & Ding's (2017, Ann
// Intern Med 167:268) worked example holds for an HR of 3.9 with lower
// limit 2.4: E-values 7.26 and 4.23 (CHECKS.md). The same holds for a rate
// ratio.
func TestEValueHRRareWorkedExample(t *testing.T) {
	se := (math.Log(3.9) - math.Log(2.4)) / zCrit // lower limit 2.4
	for _, f := range []struct {
		name string
		fn   func(l, s float64) (EValue, error)
	}{
		{"hazard ratio", func(l, s float64) (EValue, error) { return EValueHR(l, s, true) }},
		{"rate ratio", EValueRateRatio},
	} {
		e, err := f.fn(math.Log(3.9), se)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(e.Point-7.26) > 0.005 || math.Abs(e.CI-4.23) > 0.005 {
			t.Errorf("%s: E-values %.4f, %.4f; published 7.26, 4.23", f.name, e.Point, e.CI)
		}
	}
}

// Properties of the common-outcome conversion RR = (1 − 0.5^√HR) /
// (1 − 0.5^√(1/HR)) (VanderWeele & Ding 2017; formula from memory):
// RR(1) = 1, RR(1/HR) = 1/RR(HR), and 1 < RR < HR for HR > 1. Its slope on
// the log scale at the null is ln 2 (derived by hand: d log RR / d log HR
// = 2·N′(0)/N(0) with N(x) = 1 − 0.5^{e^{x/2}}, N(0) = ½, N′(0) = ln2/4).
// And at HR = 4: (1 − 0.25)/(1 − 0.5^0.5) = 0.75/0.292893… = 2.560660…
// (arithmetic by hand).
func TestRRFromHRCommon(t *testing.T) {
	if v := RRFromHR(1, false); math.Abs(v-1) > 1e-15 {
		t.Errorf("RR(1) = %v", v)
	}
	for _, hr := range []float64{1.01, 1.3, 2, 5, 40} {
		rr, inv := RRFromHR(hr, false), RRFromHR(1/hr, false)
		if math.Abs(rr*inv-1) > 1e-13 {
			t.Errorf("HR %v: RR·RR(1/HR) = %v, want 1", hr, rr*inv)
		}
		if !(rr > 1 && rr < hr) {
			t.Errorf("HR %v: RR %v not between 1 and HR", hr, rr)
		}
		if RRFromHR(hr, true) != hr {
			t.Errorf("rare outcome: RR(%v) = %v", hr, RRFromHR(hr, true))
		}
	}
	h := 1e-5
	slope := (math.Log(RRFromHR(math.Exp(h), false)) - math.Log(RRFromHR(math.Exp(-h), false))) / (2 * h)
	if math.Abs(slope-math.Ln2) > 1e-8 {
		t.Errorf("slope at null %v, want ln 2", slope)
	}
	if v := RRFromHR(4, false); math.Abs(v-0.75/(1-math.Sqrt(0.5))) > 1e-14 || math.Abs(v-2.560660) > 1e-6 {
		t.Errorf("RR(4) = %v, want 2.560660", v)
	}
}

// The common-outcome E-value applies EValueRR to the converted point and
// EValueCI to the converted limits; a protective HR mirrors a harmful one,
// and an interval containing 1 has CI E-value 1 (VanderWeele & Ding 2017).
func TestEValueHRCommon(t *testing.T) {
	tests := []struct {
		name       string
		logHR, se  float64
		wantCIOne  bool
		mirrorWith float64
	}{
		{"harmful", math.Log(2), 0.1, false, -math.Log(2)},
		{"protective", math.Log(0.6), 0.12, false, math.Log(1 / 0.6)},
		{"null inside", math.Log(1.1), 0.2, true, -math.Log(1.1)},
	}
	for _, tc := range tests {
		e, err := EValueHR(tc.logHR, tc.se, false)
		if err != nil {
			t.Fatal(err)
		}
		rr := RRFromHR(math.Exp(tc.logHR), false)
		if math.Abs(e.RR-rr) > 1e-15 || math.Abs(e.Point-EValueRR(rr)) > 1e-12 {
			t.Errorf("%s: point %+v", tc.name, e)
		}
		if tc.wantCIOne != (e.CI == 1) {
			t.Errorf("%s: CI E-value %v", tc.name, e.CI)
		}
		m, _ := EValueHR(tc.mirrorWith, tc.se, false)
		if math.Abs(m.Point-e.Point) > 1e-12 || math.Abs(m.CI-e.CI) > 1e-12 {
			t.Errorf("%s: mirror E-values %v/%v vs %v/%v", tc.name, m.Point, m.CI, e.Point, e.CI)
		}
	}
	if _, err := EValueHR(math.NaN(), 0.1, false); err == nil {
		t.Error("NaN log HR accepted")
	}
	if _, err := EValueHR(0.1, math.Inf(1), true); err == nil {
		t.Error("infinite SE accepted")
	}
}
