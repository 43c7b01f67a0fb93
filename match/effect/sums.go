package effect

import (
	"fmt"
	"math"
)

// ArmSums are one arm's sums over its usable rows (w > 0, outcome
// present): rows used and missing, Σw, Σw·y, Σw²·y², Σw²·y, Σw², and the
// count of outcomes other than 0 and 1 — what an engine can add up in one
// pass (warehouse.RunSumsSQL) instead of sending the rows.
type ArmSums struct {
	N, Missing, W, WY, W2Y2, W2Y, W2, NonBinary float64
}

// mean is m = Σw·y / Σw.
func (a ArmSums) mean() float64 { return a.WY / a.W }

// ss is Σw²(y − m)² = Σw²y² − 2m·Σw²y + m²·Σw², the arm's HC0 meat.
func (a ArmSums) ss() float64 {
	m := a.mean()
	return a.W2Y2 - 2*m*a.W2Y + m*m*a.W2
}

// SetSums are sums over matched sets g, with A_g = Σ_g w·y and B_g = Σ_g
// w per arm over the set's usable rows: G sets with a usable row and M
// the symmetric 4×4 matrix of Σ_g products of (A_T, B_T, A_C, B_C).
type SetSums struct {
	G float64
	M [4][4]float64
}

// UnadjustedSD is the outcome's pooled SD √((v_T + v_C)/2) from
// unweighted sums (w = 1: Σw²y² = Σy², so v = (Σy² − (Σy)²/n)/(n − 1)).
func UnadjustedSD(t, c ArmSums) float64 {
	vT := (t.W2Y2 - t.WY*t.WY/t.N) / (t.N - 1)
	vC := (c.W2Y2 - c.WY*c.WY/c.N) / (c.N - 1)
	return math.Sqrt((vT + vC) / 2)
}

// FromSums returns the same estimates as Difference (sets nil) or
// ClusteredDifference, and for a binary outcome Contrasts, from sums
// alone.
//
// Weighted difference: τ̂ = m_T − m_C, m = Σw·y/Σw per arm.
// HC0 (White 1980), with r the residual from the arm's own mean and the
// arm's factor f(p) = 1 (difference), 1/p (ln risk ratio) or 1/(p(1−p))
// (ln odds ratio, delta method; p = m for a binary outcome):
//
//	Var = f(m_T)²·Σ_T w²(y − m_T)²/(Σ_T w)² + f(m_C)²·Σ_C w²(y − m_C)²/(Σ_C w)²
//	Σ w²(y − m)² = Σw²y² − 2m·Σw²y + m²·Σw²
//
// Cluster-robust over matched sets (Liang & Zeger 1986, with G/(G−1)):
// set g's score is u_g = a_T(A_gT − m_T B_gT) − a_C(A_gC − m_C B_gC),
// a = f(m)/Σw of the arm, so with c = (a_T, −a_T m_T, −a_C, a_C m_C)
//
//	Var = G/(G−1) · Σ_g u_g² = G/(G−1) · cᵀ M c,  M_ij = Σ_g v_gi v_gj,  v_g = (A_gT, B_gT, A_gC, B_gC).
//
// Both are exact rearrangements of match/effect's per-row sums; the test
// in warehouse/scaletest checks them against match/effect on the same
// data.
func FromSums(t, c ArmSums, sets *SetSums, binary bool) ([]Estimate, error) {
	if t.N == 0 || c.N == 0 {
		return nil, fmt.Errorf("effect: an arm has no unit with positive weight and an observed outcome: %w", ErrEmptyArm)
	}
	if sets != nil && sets.G < 2 {
		return nil, fmt.Errorf("effect: clustered difference: %v cluster(s) with usable rows; a cluster-robust SE needs at least 2", sets.G)
	}
	mT, mC := t.mean(), c.mean()
	variance := func(fT, fC float64) float64 {
		if sets == nil {
			return fT*fT*t.ss()/(t.W*t.W) + fC*fC*c.ss()/(c.W*c.W)
		}
		aT, aC := fT/t.W, fC/c.W
		cv := [4]float64{aT, -aT * mT, -aC, aC * mC}
		var v float64
		for i := range 4 {
			for j := range 4 {
				v += cv[i] * sets.M[i][j] * cv[j]
			}
		}
		return v * sets.G / (sets.G - 1)
	}
	base := Estimate{NTreated: int(t.N), NControl: int(c.N), NMissing: int(t.Missing + c.Missing)}
	diff := base
	diff.Estimate = mT - mC
	diff.SE = math.Sqrt(variance(1, 1))
	diff.CILow, diff.CIHigh = diff.Estimate-ZCrit*diff.SE, diff.Estimate+ZCrit*diff.SE
	diff.Z = diff.Estimate / diff.SE
	diff.P = math.Erfc(math.Abs(diff.Z) / math.Sqrt2)
	diff.Method = MethodHC0
	if sets != nil {
		diff.Method = MethodCR
	}
	if !binary || !(mT > 0 && mT < 1 && mC > 0 && mC < 1) {
		return []Estimate{diff}, nil
	}
	diff.Contrast = ContrastDifference
	ratio := func(logRatio, v float64, method, contrast string) Estimate {
		e := base
		se := math.Sqrt(v)
		e.Estimate, e.SE = math.Exp(logRatio), se
		e.CILow, e.CIHigh = math.Exp(logRatio-ZCrit*se), math.Exp(logRatio+ZCrit*se)
		e.Z = logRatio / se
		e.P = math.Erfc(math.Abs(e.Z) / math.Sqrt2)
		e.Method, e.Contrast = method, contrast
		return e
	}
	mRR, mOR := MethodRatioHC0, MethodOddsHC0
	if sets != nil {
		mRR, mOR = MethodRatioCR, MethodOddsCR
	}
	rr := ratio(math.Log(mT)-math.Log(mC), variance(1/mT, 1/mC), mRR, ContrastRiskRatio)
	or := ratio(math.Log(mT/(1-mT))-math.Log(mC/(1-mC)), variance(1/(mT*(1-mT)), 1/(mC*(1-mC))), mOR, ContrastOddsRatio)
	return []Estimate{diff, rr, or}, nil
}
