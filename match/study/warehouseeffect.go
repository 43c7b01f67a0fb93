package study

import (
	"fmt"

	"counterpart/match/effect"
	"counterpart/match/weights"
	"counterpart/warehouse"
)

// effectsInWarehouse fills sum.Effects, outcome by outcome and adjustment
// by adjustment in the in-memory order, from the sums of the rows written
// in the publish transaction (warehouse.ScaleTx.RunSums): per-arm sums for
// the unadjusted and weighted estimates, per-set sums for the matched one. Rosenbaum's Γ needs the
// pairs' outcomes and is left undefined (NaN).
func effectsInWarehouse(s *Spec, sum *Summary, rs *warehouse.Sums) error {
	for o, name := range s.Cohort.Outcomes {
		arm := func(a, g int) effect.ArmSums { return effect.ArmSums(rs.Effects[o][a][g]) }
		ut, uc := arm(0, 1), arm(0, 0)
		// The sums count values other than 0 and 1: the reader's rule
		// (warehouse.ClassifyOutcome) without reading the rows.
		kind := warehouse.OutcomeContinuous
		if ut.NonBinary+uc.NonBinary == 0 {
			kind = warehouse.OutcomeBinary
		}
		binary := outcomeKinds[kind].events
		sc := outcomeScale{prevalence: (ut.WY + uc.WY) / (ut.N + uc.N), sd: effect.UnadjustedSD(ut, uc)}
		ea := 0 // index into the effect adjustments (all but matched)
		for _, adj := range adjustmentNames(s) {
			var t, cc effect.ArmSums
			var sets *effect.SetSums
			estimand := "none"
			switch adj {
			case "unadjusted":
				t, cc = ut, uc
				ea++
			case "matched":
				estimand = "att"
				m := rs.Matched[o]
				sets = &effect.SetSums{G: m.G, M: m.M}
				t, cc = effect.ArmSums(m.T), effect.ArmSums(m.C)
			default:
				estimand = weights.Estimand(adj)
				t, cc = arm(ea, 1), arm(ea, 0)
				ea++
			}
			ests, err := effect.FromSums(t, cc, sets, binary)
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
