package study

import (
	"errors"
	"fmt"
	"math"

	"counterpart/match/effect"
	"counterpart/match/sensitivity"
	"counterpart/warehouse"
)

// sensitivityAlpha is the one-sided level at which Rosenbaum's Γ is
// reported: the Γ at which the upper-bound p-value first exceeds 0.05
// (Rosenbaum 2002, ch. 4; common practice).
const sensitivityAlpha = 0.05

// adjustment is one way of comparing the arms, as the estimate stage sees it.
type adjustment struct {
	name, estimand string
	// w are per-unit weights (nil: every unit weight 1).
	w []float64
	// matched adjustments estimate on the expanded matched rows instead.
	matched bool
}

// matchedRows is the matched sample expanded to one row per set
// appearance: treated weight 1, each control 1/k of its set, clustered by
// set (a reused control appears once per set it serves).
type matchedRows struct {
	unit    []int
	z       []bool
	w       []float64
	cluster []int
	// pairs is set for 1:1 matching without reuse: the treated and control
	// unit of each pair, for Rosenbaum bounds.
	pairs [][2]int
	// reuse holds the sets for the Abadie–Imbens variance.
	reuse       bool
	setTreated  []int
	setControls [][]int
}

// outcomeKind is what one kind of outcome brings to the estimate stage:
// its contrasts under an adjustment and how sensitivity analysis reads it.
// A kind is chosen per outcome by outcomeKindOf; the time-to-event and
// rate kinds plug in beside the two below.
type outcomeKind struct {
	// contrasts estimates the kind's effect rows from per-row outcomes,
	// arms and weights (nil: every row weight 1); cluster groups dependent
	// rows (nil: rows independent).
	contrasts func(y []float64, z []bool, w []float64, cluster []int) ([]effect.Estimate, error)
	// events: sensitivity reads the outcome as 0/1 events (McNemar's Γ,
	// E-values from the ratio rows rather than the difference).
	events bool
}

// difference is the continuous kind's contrast: the weighted mean
// difference, with a cluster-robust SE when rows are clustered.
func difference(y []float64, z []bool, w []float64, cluster []int) ([]effect.Estimate, error) {
	var e effect.Estimate
	var err error
	if cluster != nil {
		e, err = effect.ClusteredDifference(y, z, w, cluster)
	} else {
		e, err = effect.Difference(y, z, w)
	}
	return []effect.Estimate{e}, err
}

// eventContrasts are the binary kind's contrasts: risk difference, risk
// ratio and odds ratio; the difference alone when an arm's risk is 0 or 1
// leaves the ratios undefined.
func eventContrasts(y []float64, z []bool, w []float64, cluster []int) ([]effect.Estimate, error) {
	rows, err := effect.Contrasts(y, z, w, cluster)
	if errors.Is(err, effect.ErrDegenerateRisk) {
		return difference(y, z, w, cluster)
	}
	return rows, err
}

var (
	continuousOutcome = outcomeKind{contrasts: difference}
	binaryOutcome     = outcomeKind{contrasts: eventContrasts, events: true}
)

// outcomeKinds maps the reader's classes to what each brings.
var outcomeKinds = map[warehouse.OutcomeKind]outcomeKind{
	warehouse.OutcomeContinuous: continuousOutcome,
	warehouse.OutcomeBinary:     binaryOutcome,
}

// outcomeKindOf is the kind of an outcome as the reader classed it.
func outcomeKindOf(o warehouse.Outcome) outcomeKind {
	return outcomeKinds[o.Kind]
}

// estimateOutcome returns the effect rows of one outcome under one
// adjustment: its kind's contrasts, each with its sensitivity figures.
func estimateOutcome(o warehouse.Outcome, z []bool, a adjustment, mr *matchedRows, logit []float64, scale outcomeScale) ([]EffectRow, error) {
	kind := outcomeKindOf(o)
	y := o.Values
	var rows []effect.Estimate
	var err error
	if a.matched {
		// Matched estimates work on the expanded rows (one per set
		// appearance), clustered by set.
		yy := make([]float64, len(mr.unit))
		for r, u := range mr.unit {
			yy[r] = y[u]
		}
		rows, err = kind.contrasts(yy, mr.z, mr.w, mr.cluster)
		if err == nil && mr.reuse {
			// Clustering by set understates the dependence a reused
			// control creates; use Abadie & Imbens (2006) for the
			// difference instead.
			var ai effect.Estimate
			ai, err = effect.ReuseEstimate(y, z, logit, mr.setTreated, mr.setControls)
			if err == nil {
				ai.Contrast = effect.ContrastDifference
				rows[0] = ai
			}
		}
	} else {
		rows, err = kind.contrasts(y, z, a.w, nil)
	}
	if err != nil {
		return nil, err
	}
	out := make([]EffectRow, 0, len(rows))
	for _, e := range rows {
		r := effectRow(o.Name, a.name, a.estimand, e)
		addEValue(&r, e, kind.events, scale)
		if a.matched && mr.pairs != nil && r.Contrast == effect.ContrastDifference {
			if g, ok := rosenbaumGamma(y, mr.pairs, kind.events, e.Estimate); ok {
				r.RosenbaumGamma = Num(g)
			}
		}
		out = append(out, r)
	}
	return out, nil
}

// outcomeScale holds what the E-value conversions need about an outcome.
type outcomeScale struct {
	sd         float64 // pooled unadjusted SD (continuous outcomes)
	prevalence float64 // share of events (binary outcomes)
}

func scaleOf(o warehouse.Outcome, z []bool) outcomeScale {
	sd, prevalence := sensitivity.OutcomeScale(o.Values, z)
	return outcomeScale{sd: sd, prevalence: prevalence}
}

// addEValue fills a row's E-values (sensitivity.EValueFor).
func addEValue(r *EffectRow, e effect.Estimate, events bool, sc outcomeScale) {
	if ev, ok := sensitivity.EValueFor(e.Contrast, e.Estimate, e.SE, events, sc.sd, sc.prevalence); ok {
		r.EValue, r.EValueCI = Num(ev.Point), Num(ev.CI)
	}
}

// rosenbaumGamma is sensitivity.PairGamma at the reported level.
func rosenbaumGamma(y []float64, pairs [][2]int, events bool, estimate float64) (float64, bool) {
	return sensitivity.PairGamma(y, pairs, events, estimate, sensitivityAlpha)
}

func effectRow(outcome, adjustment, estimand string, e effect.Estimate) EffectRow {
	contrast := e.Contrast
	if contrast == "" {
		contrast = effect.ContrastDifference
	}
	return EffectRow{Outcome: outcome, Adjustment: adjustment, Estimand: estimand, Contrast: contrast, Estimate: Num(e.Estimate), SE: Num(e.SE),
		CILow: Num(e.CILow), CIHigh: Num(e.CIHigh), P: Num(e.P), NTreated: e.NTreated, NControl: e.NControl, NMissing: e.NMissing, Method: e.Method,
		EValue: Num(math.NaN()), EValueCI: Num(math.NaN()), RosenbaumGamma: Num(math.NaN())}
}

// estimateAll fills sum.Effects for every outcome and adjustment.
func estimateAll(c *warehouse.Cohort, adjs []adjustment, mr *matchedRows, logit []float64, sum *Summary) error {
	for _, o := range c.Outcomes {
		sc := scaleOf(o, c.Treated)
		for _, a := range adjs {
			rows, err := estimateOutcome(o, c.Treated, a, mr, logit, sc)
			if err != nil {
				return badInput(fmt.Sprintf("estimate %s (%s)", o.Name, a.name), err)
			}
			sum.Effects = append(sum.Effects, rows...)
		}
	}
	return nil
}
