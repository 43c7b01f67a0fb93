package study

import (
	"context"
	"errors"
	"fmt"

	"counterpart/match/score"
	"counterpart/warehouse"
)

// FitInWarehouse fits the propensity model inside the engine
// (score.fit_in: warehouse): Describe checks and summarises the cohort,
// NewDesignSQL builds the same design as buildDesign (numeric covariates
// as is, categorical ones as indicators of every non-reference level),
// and the Newton iteration reads the data only through aggregate
// queries. Only k×k numbers cross the wire; the fit has no PS or Logit
// (ScoreInto and MatchInput compute them in the engine from fit.Coef).
//
// With a seed from a sample (seedInWarehouse) the iteration is
// score.FitMomentsChord: gradient passes (k sums each) with the sample's
// information held fixed, then one full Moments pass (k(k+1)/2 more sums)
// for the standard errors. A full pass costs several gradient passes
// (about 5× at 40 design columns on DuckDB), so this takes about half
// the time of Newton's method, which needs a full pass per step
// (score.FitMomentsFrom, used without a seed and whenever the chord
// iteration hands over). Both converge to the same maximum.
// Errors wrap warehouse.ErrBadInput where the data are at fault.
func FitInWarehouse(ctx context.Context, iw warehouse.InWarehouse, q warehouse.CohortQuery, opt score.Options) (*score.Fit, *warehouse.DesignSQL, error) {
	return fitInWarehouse(ctx, iw, q, opt, nil, nil)
}

// fitInWarehouse is FitInWarehouse with a guard that sees the cohort's
// description before any design is built (the run's width check), timed
// on clk (nil: untimed) as the design stage (Describe, guard, design SQL)
// and the fit stage (the seed and the aggregate passes).
func fitInWarehouse(ctx context.Context, iw warehouse.InWarehouse, q warehouse.CohortQuery, opt score.Options, guard func(*warehouse.Description) error, clk *clock) (*score.Fit, *warehouse.DesignSQL, error) {
	desc, d, err := designInWarehouse(ctx, iw, q, guard, clk)
	if err != nil {
		return nil, nil, err
	}
	defer clk.begin("fit")()
	k := len(d.Columns) + 1
	moments := func(beta []float64, info bool) (*warehouse.Moments, error) {
		m, err := iw.Moments(ctx, q, d, beta, info)
		if err != nil {
			return nil, err
		}
		if m.N != desc.N {
			return nil, fmt.Errorf("the cohort query returned %d rows, then %d: the data changed during the fit", desc.N, m.N)
		}
		if len(m.Grad) != k {
			return nil, fmt.Errorf("moments: %d sums for %d columns", len(m.Grad), k)
		}
		return m, nil
	}
	eval := func(beta []float64) ([]float64, []float64, float64, int, error) {
		m, err := moments(beta, true)
		if err != nil {
			return nil, nil, 0, 0, err
		}
		return m.Info, m.Grad, m.LogLik, m.Perfect, nil
	}
	grad := func(beta []float64) ([]float64, float64, int, error) {
		m, err := moments(beta, false)
		if err != nil {
			return nil, 0, 0, err
		}
		return m.Grad, m.LogLik, m.Perfect, nil
	}
	start, startInfo, err := seedInWarehouse(ctx, iw, q, d, desc.N, opt)
	if err != nil {
		return nil, nil, err
	}
	var fit *score.Fit
	if start != nil {
		fit, _, _, err = score.FitMomentsChord(d.Names(), d.Centers(), d.Scales(), desc.N, desc.NTreated, eval, grad, opt, start, startInfo)
	} else {
		fit, _, err = score.FitMomentsFrom(d.Names(), d.Centers(), d.Scales(), desc.N, desc.NTreated, eval, opt, nil)
	}
	if err != nil {
		var nc *score.NotConvergedError
		if fit == nil || !errors.As(err, &nc) {
			return nil, nil, badInput("fit score", err)
		}
		return fit, d, badInput("fit score", err)
	}
	return fit, d, nil
}

// designInWarehouse describes the cohort, runs the guard on the
// description and builds the design SQL: the design stage.
func designInWarehouse(ctx context.Context, iw warehouse.InWarehouse, q warehouse.CohortQuery, guard func(*warehouse.Description) error, clk *clock) (*warehouse.Description, *warehouse.DesignSQL, error) {
	defer clk.begin("design")()
	desc, err := iw.Describe(ctx, q)
	if err != nil {
		return nil, nil, fmt.Errorf("describe cohort: %w", err)
	}
	if guard != nil {
		if err := guard(desc); err != nil {
			return nil, nil, err
		}
	}
	d, err := warehouse.NewDesignSQL(desc)
	if err != nil {
		return nil, nil, fmt.Errorf("design: %w", err)
	}
	return desc, d, nil
}

// SeedSampleSize is about how many units seedInWarehouse fits in memory to
// start the in-warehouse Newton iteration: the sample keeps one unit in
// max(1, n/SeedSampleSize), so it holds n units when n ≤ SeedSampleSize
// and about SeedSampleSize otherwise (~20 MB of design for 25 columns).
const SeedSampleSize = 100000

// seedInWarehouse returns the start of the in-warehouse fit: the same
// model fitted in memory (score.FitModel) on a deterministic sample of the
// units (warehouse.Sampler: a hash of the unit id modulo n/SeedSampleSize),
// and the sample's information at that start scaled up to the cohort
// (score.SampleInfo), or nils when the engine has no Sampler or the
// sample's fit fails (too few units for a rare level, separation in the
// sample, ...): the default start is then used. The sample only seeds the
// iteration; the sums of every step and the convergence test are over the
// full cohort (score.FitMomentsChord, score.FitMomentsFrom), so the
// estimate is the full-data one to the tolerance of the convergence rule.
// A sample of ~100k units puts the start within a few standard errors of
// the answer, and its information within a few per cent of the cohort's.
func seedInWarehouse(ctx context.Context, iw warehouse.InWarehouse, q warehouse.CohortQuery, d *warehouse.DesignSQL, n int, opt score.Options) ([]float64, []float64, error) {
	sm, ok := iw.(warehouse.Sampler)
	if !ok {
		return nil, nil, nil
	}
	x, z, err := sm.SampleDesign(ctx, q, d, max(1, n/SeedSampleSize))
	if err != nil {
		if ctx.Err() != nil {
			return nil, nil, fmt.Errorf("fit score: seed sample: %w", err)
		}
		return nil, nil, nil
	}
	if len(z) < 2*len(x)+2 {
		return nil, nil, nil
	}
	fit, err := score.FitModel(x, d.Names(), z, opt)
	if err != nil || fit == nil {
		return nil, nil, nil
	}
	info := score.SampleInfo(x, fit.Coef, d.Centers(), d.Scales(), float64(n)/float64(len(z)))
	return fit.Coef, info, nil
}

// SupportInWarehouse returns the common-support interval of rule
// (score.SupportInterval) on the logit scale; only minmax needs the arms'
// ranges, read with LogitRange so the boundary units are kept exactly.
func SupportInWarehouse(ctx context.Context, iw warehouse.InWarehouse, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, rule string) (warehouse.Support, error) {
	var min, max [2]float64
	if rule == score.SupportMinMax {
		r, err := iw.LogitRange(ctx, q, d, coef)
		if err != nil {
			return warehouse.Support{}, fmt.Errorf("support: %w", err)
		}
		min, max = r.Min, r.Max
	}
	low, high, err := score.SupportInterval(rule, score.ScaleLogit, min, max)
	if err != nil {
		return warehouse.Support{}, fmt.Errorf("support: %w: %w", warehouse.ErrBadInput, err)
	}
	return warehouse.Support{Low: low, High: high}, nil
}
