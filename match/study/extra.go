package study

import (
	"context"
	"fmt"

	"counterpart/match/effect"
	"counterpart/match/score"
	"counterpart/match/weights"
	"counterpart/warehouse"
)

// applyRules applies the study's weight rules in a fixed order: truncate
// at within-arm percentiles, clamp to fixed bounds, then stabilise, so
// that stabilising (a rescaling per arm) does not move the cut points.
func applyRules(r WeightRules, w []float64, z []bool) ([]float64, error) {
	var err error
	if len(r.Percentiles) == 2 {
		if w, err = weights.Truncate(w, z, r.Percentiles[0], r.Percentiles[1]); err != nil {
			return nil, err
		}
	}
	if len(r.Bounds) == 2 {
		w = weights.Clip(w, r.Bounds[0], r.Bounds[1])
	}
	if r.Stabilize {
		w = weights.Stabilize(w, z)
	}
	return w, weights.Check(w)
}

// augmentAll adds, for every adjustment, the weighted regression of the
// outcome on treatment and the model's covariates with a robust SE
// (clustered by matched set for matching): the estimate stays consistent
// if either the score or the outcome model is right. Rows are named
// "<adjustment>+regression".
func augmentAll(c *warehouse.Cohort, adjs []adjustment, mr *matchedRows, x [][]float64, sum *Summary) error {
	for _, o := range c.Outcomes {
		for _, a := range adjs {
			var e effect.Estimate
			var err error
			if a.matched {
				yy := make([]float64, len(mr.unit))
				xx := make([][]float64, len(x))
				for j := range xx {
					xx[j] = make([]float64, len(mr.unit))
				}
				for r, u := range mr.unit {
					yy[r] = o.Values[u]
					for j := range x {
						xx[j][r] = x[j][u]
					}
				}
				e, err = effect.Augmented(yy, mr.z, mr.w, xx, mr.cluster)
			} else {
				e, err = effect.Augmented(o.Values, c.Treated, a.w, x, nil)
			}
			if err != nil {
				return badInput(fmt.Sprintf("estimate %s (%s+regression)", o.Name, a.name), err)
			}
			r := effectRow(o.Name, a.name+"+regression", a.estimand, e)
			sum.Effects = append(sum.Effects, r)
		}
	}
	return nil
}

// bootstrapAll adds bootstrap intervals to the weighting estimators'
// difference rows. Each replicate resamples units with replacement,
// refits the score, reapplies the support rule and the weight rules and
// re-estimates every outcome under every scheme, so the intervals carry
// the score's estimation error (Efron & Tibshirani 1993, ch. 6 and 13).
// Matching is left out: the bootstrap is not valid for nearest-neighbour
// matching (Abadie & Imbens 2008, Econometrica 76:1537, from memory).
// Replicate r draws from its own PCG stream seeded with (seed, r), so the
// result does not depend on the number of workers.
// ctx cancels it: a replicate starting after cancellation returns at once
// and a running refit stops at its next chunk.
func bootstrapAll(ctx context.Context, s *Spec, c *warehouse.Cohort, d *design, sum *Summary) error {
	schemes := s.Schemes()
	type key struct{ outcome, scheme string }
	var keys []key
	for _, o := range c.Outcomes {
		for _, sc := range schemes {
			keys = append(keys, key{o.Name, sc})
		}
	}
	// Resolve the schemes and the model once, not in every replicate.
	fns := make([]func(ps []float64, z []bool) []float64, len(schemes))
	for i, sc := range schemes {
		fn, err := weights.ByName(sc)
		if err != nil {
			return badInput("bootstrap", err)
		}
		fns[i] = fn
	}
	model, err := score.ParseModel(s.Score.Model)
	if err != nil {
		return badInput("bootstrap", err)
	}
	reps := s.Estimate.Bootstrap
	n := c.N()
	if len(keys) == 0 {
		return nil
	}
	// Each worker keeps its resampled design, treatment and outcome.
	replicate := func() func(idx []int, out []float64) error {
		x := make([][]float64, len(d.x))
		for j := range x {
			x[j] = make([]float64, n)
		}
		z := make([]bool, n)
		y := make([]float64, n)
		return func(idx []int, out []float64) error {
			if err := ctx.Err(); err != nil {
				return err
			}
			for j := range x {
				for i, k := range idx {
					x[j][i] = d.x[j][k]
				}
			}
			for i, k := range idx {
				z[i] = c.Treated[k]
			}
			fit, err := score.FitModel(x, d.names, z, score.Options{Model: model, Lambda: s.Score.Lambda, MaxIter: s.Score.MaxIter, Check: checker(ctx)})
			if err != nil {
				return err
			}
			keep := score.SupportMask(s.Support, fit.PS, z)
			k := 0
			for _, o := range c.Outcomes {
				for i, u := range idx {
					y[i] = o.Values[u]
				}
				for si := range schemes {
					w, err := applyRules(s.Rules, weights.Restrict(fns[si](fit.PS, z), keep), z)
					var e effect.Estimate
					if err == nil {
						e, err = effect.Difference(y, z, w)
					}
					if err != nil {
						return err
					}
					out[k] = e.Estimate
					k++
				}
			}
			return nil
		}
	}
	res, err := effect.BootstrapMany(n, reps, s.Estimate.Seed, 0, len(keys), replicate)
	if cerr := ctx.Err(); cerr != nil {
		return fmt.Errorf("bootstrap: %w", cerr)
	}
	if err != nil {
		return fmt.Errorf("bootstrap: %w: only %d of %d replicates could be fitted; the sample may be too small or separated", warehouse.ErrBadInput, res[0].Reps, reps)
	}
	for k, kk := range keys {
		for i := range sum.Effects {
			e := &sum.Effects[i]
			if e.Outcome == kk.outcome && e.Adjustment == kk.scheme && e.Contrast == "difference" {
				e.BootSE = Num(res[k].SE)
				e.BootLow = Num(res[k].PercentileLow)
				e.BootHigh = Num(res[k].PercentileHigh)
				e.BootReps = res[k].Reps
			}
		}
	}
	return nil
}
