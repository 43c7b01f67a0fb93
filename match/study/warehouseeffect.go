package study

import (
	"context"
	"fmt"
	"math"

	"counterpart/match/effect"
	"counterpart/match/weights"
	"counterpart/warehouse"
)

// armSums are one arm's sums over its usable rows (w > 0, outcome
// present), as warehouse.RunSumsSQL returns them.
type armSums struct {
	n, miss                   float64
	sw, swy, sw2y2, sw2y, sw2 float64
	nonBinary                 float64
}

// mean is m = Σw·y / Σw.
func (a armSums) mean() float64 { return a.swy / a.sw }

// ss is Σw²(y − m)² = Σw²y² − 2m·Σw²y + m²·Σw², the arm's HC0 meat.
func (a armSums) ss() float64 {
	m := a.mean()
	return a.sw2y2 - 2*m*a.sw2y + m*m*a.sw2
}

// setSums are warehouse.MatchedSumsSQL's sums over matched sets, with
// A_g = Σ_g w·y and B_g = Σ_g w per arm over the set's usable rows, and
// M the 4×4 matrix of Σ_g products of (A_T, B_T, A_C, B_C).
type setSums struct {
	g float64

	m [4][4]float64
}

// inWarehouseEffect returns the same estimates as effect.Difference (sets
// nil) or effect.ClusteredDifference, and for a binary outcome
// effect.Contrasts, from sums alone.
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
func inWarehouseEffect(t, c armSums, sets *setSums, binary bool) ([]effect.Estimate, error) {
	if t.n == 0 || c.n == 0 {
		return nil, fmt.Errorf("effect: an arm has no unit with positive weight and an observed outcome: %w", effect.ErrEmptyArm)
	}
	if sets != nil && sets.g < 2 {
		return nil, fmt.Errorf("effect: clustered difference: %v cluster(s) with usable rows; a cluster-robust SE needs at least 2", sets.g)
	}
	mT, mC := t.mean(), c.mean()
	variance := func(fT, fC float64) float64 {
		if sets == nil {
			return fT*fT*t.ss()/(t.sw*t.sw) + fC*fC*c.ss()/(c.sw*c.sw)
		}
		aT, aC := fT/t.sw, fC/c.sw
		cv := [4]float64{aT, -aT * mT, -aC, aC * mC}
		var v float64
		for i := range 4 {
			for j := range 4 {
				v += cv[i] * sets.m[i][j] * cv[j]
			}
		}
		return v * sets.g / (sets.g - 1)
	}
	base := effect.Estimate{NTreated: int(t.n), NControl: int(c.n), NMissing: int(t.miss + c.miss)}
	diff := base
	diff.Estimate = mT - mC
	diff.SE = math.Sqrt(variance(1, 1))
	diff.CILow, diff.CIHigh = diff.Estimate-effect.ZCrit*diff.SE, diff.Estimate+effect.ZCrit*diff.SE
	diff.Z = diff.Estimate / diff.SE
	diff.P = math.Erfc(math.Abs(diff.Z) / math.Sqrt2)
	diff.Method = effect.MethodHC0
	if sets != nil {
		diff.Method = effect.MethodCR
	}
	if !binary || !(mT > 0 && mT < 1 && mC > 0 && mC < 1) {
		return []effect.Estimate{diff}, nil
	}
	diff.Contrast = effect.ContrastDifference
	ratio := func(logRatio, v float64, method, contrast string) effect.Estimate {
		e := base
		se := math.Sqrt(v)
		e.Estimate, e.SE = math.Exp(logRatio), se
		e.CILow, e.CIHigh = math.Exp(logRatio-effect.ZCrit*se), math.Exp(logRatio+effect.ZCrit*se)
		e.Z = logRatio / se
		e.P = math.Erfc(math.Abs(e.Z) / math.Sqrt2)
		e.Method, e.Contrast = method, contrast
		return e
	}
	mRR, mOR := effect.MethodRatioHC0, effect.MethodOddsHC0
	if sets != nil {
		mRR, mOR = effect.MethodRatioCR, effect.MethodOddsCR
	}
	rr := ratio(math.Log(mT)-math.Log(mC), variance(1/mT, 1/mC), mRR, effect.ContrastRiskRatio)
	or := ratio(math.Log(mT/(1-mT))-math.Log(mC/(1-mC)), variance(1/(mT*(1-mT)), 1/(mC*(1-mC))), mOR, effect.ContrastOddsRatio)
	return []effect.Estimate{diff, rr, or}, nil
}

// effectsInWarehouse fills sum.Effects, outcome by outcome and adjustment
// by adjustment in the in-memory order, from the sums of the rows written
// in the publish transaction: RunSumsSQL's per-arm sums (rs) for the
// unadjusted and weighted estimates, MatchedSumsSQL's per-set sums for
// the matched one. Rosenbaum's Γ needs the pairs' outcomes and is left
// undefined (NaN).
func effectsInWarehouse(ctx context.Context, sp warehouse.ScalePublisher, c *warehouse.Contract, s *Spec, sum *Summary, rs *runSums) error {
	// The matched sets' sums of every outcome, from one join of the
	// matches to the snapshot.
	var matched []float64
	if s.Matching.Algorithm != "off" && len(s.Cohort.Outcomes) > 0 {
		text, err := warehouse.MatchedSumsSQL(c, s.Cohort.Outcomes)
		if err != nil {
			return err
		}
		rows, err := sp.QueryRows(ctx, text, sum.RunID)
		if err != nil {
			return fmt.Errorf("effects (matched): %w", err)
		}
		if len(rows) != 1 || len(rows[0]) != len(s.Cohort.Outcomes)*warehouse.MatchedWidth {
			return fmt.Errorf("effects (matched): %d rows, want one of %d sums", len(rows), len(s.Cohort.Outcomes)*warehouse.MatchedWidth)
		}
		for _, x := range rows[0] {
			matched = append(matched, numOf(x))
		}
	}
	for o, name := range s.Cohort.Outcomes {
		ut, uc := rs.effect(o, 0, 1), rs.effect(o, 0, 0)
		binary := ut.nonBinary+uc.nonBinary == 0
		sc := outcomeScale{prevalence: (ut.swy + uc.swy) / (ut.n + uc.n)}
		// Unadjusted w = 1: Σw²y² = Σy², so the n−1 variance per arm is
		// (Σy² − (Σy)²/n)/(n − 1).
		vT := (ut.sw2y2 - ut.swy*ut.swy/ut.n) / (ut.n - 1)
		vC := (uc.sw2y2 - uc.swy*uc.swy/uc.n) / (uc.n - 1)
		sc.sd = math.Sqrt((vT + vC) / 2)
		for a, adj := range adjustmentNames(s) {
			var t, cc armSums
			var sets *setSums
			estimand := "none"
			switch adj {
			case "unadjusted":
				t, cc = ut, uc
			case "matched":
				estimand = "att"
				v := matched[o*warehouse.MatchedWidth : (o+1)*warehouse.MatchedWidth]
				sets = &setSums{g: v[0]}
				t = armSums{n: v[1], miss: v[3], sw: v[5], swy: v[6]}
				cc = armSums{n: v[2], miss: v[4], sw: v[7], swy: v[8]}
				// v[9..18]: AtAt AtBt BtBt AcAc AcBc BcBc AtAc AtBc BtAc BtBc
				m := &sets.m
				m[0][0], m[0][1], m[1][1] = v[9], v[10], v[11]
				m[2][2], m[2][3], m[3][3] = v[12], v[13], v[14]
				m[0][2], m[0][3], m[1][2], m[1][3] = v[15], v[16], v[17], v[18]
				for i := range 4 {
					for j := range i {
						m[i][j] = m[j][i]
					}
				}
			default:
				estimand = weights.Estimand(adj)
				t, cc = rs.effect(o, a, 1), rs.effect(o, a, 0)
			}
			ests, err := inWarehouseEffect(t, cc, sets, binary)
			if err != nil {
				return badInput(fmt.Sprintf("estimate %s (%s)", name, adj), err)
			}
			for _, e := range ests {
				r := effectRow(name, adj, estimand, e)
				addEValue(&r, e, binary, sc)
				sum.Effects = append(sum.Effects, r)
			}
		}
	}
	return nil
}
