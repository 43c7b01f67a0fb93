package score

import (
	"fmt"
	"math"
)

// MomentsFunc evaluates one Newton step's sums at β̃, the coefficients on
// the standardised scale x̃_j = (x_j − center_j)·invScale_j (intercept
// first), over every unit, wherever the data live:
//
//	info[a*k+b] = Σ_i w_i x̃_ia x̃_ib  (upper triangle, k×k row-major; w = e(1 − e))
//	grad[a]     = Σ_i x̃_ia (z_i − e_i)
//	logLik      = Σ_i z_i η_i − log(1 + exp η_i)
//	perfect     = #{i: z_i = 1, η_i > 15} + #{i: z_i = 0, η_i < −15}
//
// A database engine computes them with one aggregate query
// (warehouse.InWarehouse.Moments).
type MomentsFunc func(beta []float64) (info, grad []float64, logLik float64, perfect int, err error)

// FitMoments fits the same model as FitModel, by the same Newton
// iteration, step halving, convergence rule (Options.Tol), separation
// diagnosis, collinearity check and standard errors, but reads the data
// only through moments: nothing per unit is held, so the cohort can stay
// in the warehouse. center and invScale give the standardisation the
// moments are computed on (mean and 1/population SD of each column, as
// FitModel computes them); n and nTreated count the units.
//
// The returned Fit has PS and Logit nil: compute them where the data are,
// from Coef. Std returns the standardised coefficients the last moments
// call was made at. Errors are those of FitModel, plus an error from
// moments wrapped with the step named.
func FitMoments(names []string, center, invScale []float64, n, nTreated int, eval MomentsFunc, opt Options) (fit *Fit, std []float64, err error) {
	return FitMomentsFrom(names, center, invScale, n, nTreated, eval, opt, nil)
}

// FitMomentsFrom is FitMoments started at start, coefficients on the
// original scale (intercept first), instead of at the intercept-only
// model; nil start is FitMoments. A start near the answer (a fit on a
// sample of the units) saves most of the Newton steps, each of which is a
// full pass over the data where they live. The start only seeds the
// iteration: every step and the convergence test use the full-data
// moments, and Newton's method on the (strictly convex) logistic
// log-likelihood goes to the same maximum from any start, so the result
// is the full-data estimate to the tolerance of Options.Tol. A start
// whose objective is worse than the intercept-only model's, or that is
// not finite, is dropped for the default start. Fit.Iterations counts the
// steps taken from the start.
//
// On the standardised scale x̃_j = (x_j − c_j)·s_j the start is
// β̃_j = β_j/s_j and β̃_0 = β_0 + Σ_j β_j c_j.
func FitMomentsFrom(names []string, center, invScale []float64, n, nTreated int, eval MomentsFunc, opt Options, start []float64) (fit *Fit, std []float64, err error) {
	if start != nil && len(start) != len(names)+1 {
		panic(fmt.Sprintf("score: %d start values for %d names", len(start), len(names)))
	}
	if len(center) != len(names) || len(invScale) != len(names) {
		panic(fmt.Sprintf("score: %d names, %d centres, %d scales", len(names), len(center), len(invScale)))
	}
	lambda, maxIter, tol, err := opt.resolve()
	if err != nil {
		return nil, nil, err
	}
	nt := nTreated
	if nt == 0 || nt == n {
		return nil, nil, &TreatmentError{N: n, NTreated: nt}
	}
	for j, s := range invScale {
		if !(s > 0) || math.IsInf(s, 0) || math.IsNaN(center[j]) || math.IsInf(center[j], 0) {
			return nil, nil, &ConstantError{Column: names[j], Value: center[j]}
		}
	}
	k := len(names) + 1
	d := &design{names: names, center: center, invScale: invScale, n: n, k: k}
	calls := 0
	pass := func(b []float64) (moments, int, error) {
		calls++
		info, grad, ll, perfect, err := eval(b)
		if err != nil {
			return moments{}, 0, fmt.Errorf("score: moments at step %d: %w", calls, err)
		}
		if len(info) != k*k || len(grad) != k {
			panic(fmt.Sprintf("score: moments returned %d info and %d grad values for k = %d", len(info), len(grad), k))
		}
		return moments{info: info, grad: grad, logLik: ll}, perfect, nil
	}
	objective := func(m *moments, b []float64) float64 { return penalisedDeviance(m.logLik, b, lambda) }

	beta := make([]float64, k)
	beta[0] = math.Log(float64(nt) / float64(n-nt))
	null, seeded := beta, false
	if start != nil {
		b := make([]float64, k)
		b[0] = start[0]
		for j := 1; j < k; j++ {
			b[j] = start[j] / invScale[j-1]
			b[0] += start[j] * center[j-1]
		}
		seeded = true
		for _, v := range b {
			seeded = seeded && !math.IsNaN(v) && !math.IsInf(v, 0)
		}
		if seeded {
			beta = b
		}
	}
	mom, perfect, err := pass(beta)
	if err != nil {
		return nil, nil, err
	}
	dev := objective(&mom, beta)
	if seeded {
		// The intercept-only model's deviance (its penalty is 0) has a
		// closed form; a seed worse than it is dropped.
		if !(dev <= -2*nullLogLik(n, nt)) {
			beta = null
			if mom, perfect, err = pass(beta); err != nil {
				return nil, nil, err
			}
			dev = objective(&mom, beta)
		}
	}
	// At a seed the check runs on X̃'WX̃ with the seed's weights instead
	// of the intercept-only model's equal weights: an exact linear
	// dependence is one under any positive weights, and the seed is kept
	// only when it fits better than the intercept-only model, so its
	// weights are not all near 0.
	if err := checkCollinear(mom.info, k, names); err != nil {
		return nil, nil, err
	}

	relChange, stepSize := math.Inf(1), math.Inf(1)
	var lastStep []float64
	it := 0
	var notConv string
	for {
		if opt.Model == Logistic {
			if -2*mom.logLik < completeDev {
				return nil, nil, d.separation(true, n, lastStep)
			}
			if it > 0 && relChange < tol && stepSize >= math.Sqrt(tol) && perfect > 0 {
				return nil, nil, d.separation(perfect == n, perfect, lastStep)
			}
		}
		if it > 0 && relChange < tol && stepSize < math.Sqrt(tol) {
			break
		}
		if it >= maxIter {
			notConv = "iteration limit reached"
			break
		}
		step, ok := newtonStep(&mom, beta, lambda)
		if !ok {
			notConv = "the information matrix is numerically singular"
			break
		}
		next := make([]float64, k)
		var nmom moments
		var nperfect int
		var ndev float64
		improved := false
		for range maxHalvings {
			for j := range next {
				next[j] = beta[j] + step[j]
			}
			if nmom, nperfect, err = pass(next); err != nil {
				return nil, nil, err
			}
			ndev = objective(&nmom, next)
			if ndev <= dev+1e-11*(math.Abs(dev)+1) {
				improved = true
				break
			}
			for j := range step {
				step[j] /= 2
			}
		}
		if !improved {
			notConv = "no step along the Newton direction lowers the deviance"
			break
		}
		it++
		relChange = math.Abs(ndev-dev) / (math.Abs(ndev) + 0.1)
		stepSize = 0
		for j, s := range step {
			stepSize = max(stepSize, math.Abs(s)/(1+math.Abs(next[j])))
		}
		beta, mom, perfect, dev, lastStep = next, nmom, nperfect, ndev, step
		if opt.OnPass != nil {
			opt.OnPass(it, dev)
		}
	}
	if notConv != "" && opt.Model == Logistic && perfect > 0 && relChange < math.Sqrt(tol) {
		return nil, nil, d.separation(perfect == n, perfect, lastStep)
	}
	fit = &Fit{
		Model:      opt.Model,
		Lambda:     lambda,
		Names:      append([]string{"(intercept)"}, names...),
		Iterations: it,
		Converged:  notConv == "",
		LogLik:     mom.logLik,
		NullLogLik: nullLogLik(n, nt),
		N:          n,
		NTreated:   nt,
	}
	fit.Coef, fit.SE = d.originalScale(beta, &mom, lambda)
	if notConv != "" {
		return fit, beta, &NotConvergedError{Model: opt.Model, Iterations: it, RelChange: relChange, Step: stepSize, Reason: notConv}
	}
	return fit, beta, nil
}
