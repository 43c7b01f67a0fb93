package study

import (
	"context"
	"errors"
	"fmt"
	"math"

	"counterpart/match/score"
	"counterpart/warehouse"
)

// FitInWarehouse fits the propensity model inside the engine
// (score.fit_in: warehouse): Describe checks and summarises the cohort,
// NewDesignSQL builds the same design as buildDesign (numeric covariates
// as is, categorical ones as indicators of every non-reference level),
// and score.FitMoments runs the Newton iteration with one Moments query
// per step. Only k×k numbers cross the wire; the fit has no PS or Logit
// (ScoreInto and MatchInput compute them in the engine from fit.Coef).
// Errors wrap warehouse.ErrBadInput where the data are at fault.
func FitInWarehouse(ctx context.Context, iw warehouse.InWarehouse, q warehouse.CohortQuery, opt score.Options) (*score.Fit, *warehouse.DesignSQL, error) {
	desc, err := iw.Describe(ctx, q)
	if err != nil {
		return nil, nil, fmt.Errorf("describe cohort: %w", err)
	}
	d, err := warehouse.NewDesignSQL(desc)
	if err != nil {
		return nil, nil, fmt.Errorf("design: %w", err)
	}
	k := len(d.Columns) + 1
	eval := func(beta []float64) ([]float64, []float64, float64, int, error) {
		m, err := iw.Moments(ctx, q, d, beta)
		if err != nil {
			return nil, nil, 0, 0, err
		}
		if m.N != desc.N {
			return nil, nil, 0, 0, fmt.Errorf("the cohort query returned %d rows, then %d: the data changed during the fit", desc.N, m.N)
		}
		if len(m.Grad) != k {
			return nil, nil, 0, 0, fmt.Errorf("moments: %d sums for %d columns", len(m.Grad), k)
		}
		return m.Info, m.Grad, m.LogLik, m.Perfect, nil
	}
	fit, _, err := score.FitMoments(d.Names(), d.Centers(), d.Scales(), desc.N, desc.NTreated, eval, opt)
	if err != nil {
		var nc *score.NotConvergedError
		if fit == nil || !errors.As(err, &nc) {
			return nil, nil, badInput("fit score", err)
		}
		return fit, d, badInput("fit score", err)
	}
	return fit, d, nil
}

// SupportInWarehouse returns the common-support interval of rule on the
// logit scale: "none" keeps every unit; "minmax" keeps η inside both arms'
// ranges, [max of minima, min of maxima] (read with LogitRange, so the
// boundary units are kept exactly); "crump" keeps 0.1 ≤ ps ≤ 0.9 (Crump,
// Hotz, Imbens & Mitnik 2009), i.e. |η| ≤ log 9.
func SupportInWarehouse(ctx context.Context, iw warehouse.InWarehouse, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, rule string) (warehouse.Support, error) {
	switch rule {
	case "", "none":
		return warehouse.Support{Low: math.Inf(-1), High: math.Inf(1)}, nil
	case "crump":
		return warehouse.Support{Low: -math.Log(9), High: math.Log(9)}, nil
	case "minmax":
		r, err := iw.LogitRange(ctx, q, d, coef)
		if err != nil {
			return warehouse.Support{}, fmt.Errorf("support: %w", err)
		}
		return warehouse.Support{Low: math.Max(r.Min[0], r.Min[1]), High: math.Min(r.Max[0], r.Max[1])}, nil
	}
	return warehouse.Support{}, fmt.Errorf("support: %w: unknown rule %q", warehouse.ErrBadInput, rule)
}
