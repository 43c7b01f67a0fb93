package score

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// GradientFunc evaluates, at β̃ on the standardised scale (intercept
// first), the cheap part of MomentsFunc's sums over every unit: the score
// grad[a] = Σ_i x̃_ia (z_i − e_i), the log-likelihood and the count of
// perfectly predicted units. It is k sums instead of k + k(k+1)/2, so
// where the data live in a warehouse one call costs a fraction of a
// MomentsFunc call.
type GradientFunc func(beta []float64) (grad []float64, logLik float64, perfect int, err error)

// Chord-iteration limits (FitMomentsChord).
const (
	// chordMaxSteps bounds the gradient passes before handing over.
	chordMaxSteps = 40
	// chordHalvings bounds the step halving of one step.
	chordHalvings = 4
)

// FitMomentsChord fits the same model as FitMomentsFrom, to the same
// maximum, with most full passes over the data replaced by gradient
// passes: from start (original scale, intercept first) it iterates
//
//	β̃ ← β̃ + A⁻¹ (g(β̃) − λPβ̃),   A = startInfo + λP
//
// with A fixed — the chord (simplified Newton) method (Ortega &
// Rheinboldt, Iterative Solution of Nonlinear Equations, 1970, §7.1;
// from memory). startInfo approximates the information X̃'WX̃ of the whole
// cohort at start (k×k, upper triangle used), for example SampleInfo of a
// fit on a sample. Near the maximum the error shrinks by ρ = ‖I − A⁻¹H‖
// per pass, H the information there; a 100,000-unit sample gave ρ ≈ 0.1
// at 2 million units and 40 columns (9 gradient passes from the seed to a
// step below 1e-10), so each gradient pass gains about a digit.
//
// The iteration stops when the step, max_j |δ_j|/(1 + |β̃_j|), is below
// Options.Tol (the distance to the fixed point is then below
// ρ/(1 − ρ)·Tol), and one full moments pass at the result gives the
// information for the standard errors and the checks FitMomentsFrom makes
// (collinearity, separation, the exact Newton step being below √Tol), and
// that exact Newton step is taken. The fixed point is where the penalised
// score is zero, which is the maximum FitMomentsFrom converges to, and
// the final Newton step puts the estimate on it to rounding.
//
// Whenever the chord iteration does not behave — A not positive definite,
// a step that chordHalvings halvings cannot make lower the deviance,
// chordMaxSteps steps (as under separation, where the steps do not
// shrink), or the final checks failing — it hands over to FitMomentsFrom from the best point reached,
// so results and every error are FitMomentsFrom's. Fit.Iterations counts
// chord steps plus any Newton steps after a hand-over; passes reports how
// many gradient passes were made (full passes are counted by eval's
// caller).
func FitMomentsChord(names []string, center, invScale []float64, n, nTreated int, eval MomentsFunc, grad GradientFunc, opt Options, start, startInfo []float64) (fit *Fit, std []float64, passes int, err error) {
	k := len(names) + 1
	if len(start) != k || len(startInfo) != k*k {
		panic(fmt.Sprintf("score: chord start has %d values and %d information entries for k = %d", len(start), len(startInfo), k))
	}
	if len(center) != len(names) || len(invScale) != len(names) {
		panic(fmt.Sprintf("score: %d names, %d centres, %d scales", len(names), len(center), len(invScale)))
	}
	lambda, _, tol, err := opt.resolve()
	if err != nil {
		return nil, nil, 0, err
	}
	newton := func(from []float64, extra int) (*Fit, []float64, int, error) {
		f, s, err := FitMomentsFrom(names, center, invScale, n, nTreated, eval, opt, from)
		if f != nil {
			f.Iterations += extra
		}
		return f, s, passes, err
	}
	if nTreated == 0 || nTreated == n {
		return newton(nil, 0)
	}
	for j, s := range invScale {
		if !(s > 0) || math.IsInf(s, 0) || math.IsNaN(center[j]) || math.IsInf(center[j], 0) {
			return newton(nil, 0)
		}
	}
	d := &design{names: names, center: center, invScale: invScale, n: n, k: k}
	beta := d.standardised(start)
	for _, v := range beta {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return newton(nil, 0)
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(penalised(&moments{info: startInfo}, k, lambda)) {
		return newton(start, 0)
	}
	// gradPass evaluates the penalised score and deviance at b. The
	// perfect count is not used: units predicted to within 1e-7 are no
	// sign of separation while the estimate converges (FitMomentsFrom
	// reads them the same way), and under separation the chord steps do
	// not shrink, so the iteration hands over to Newton's method, which
	// diagnoses it.
	gradPass := func(b []float64) (g []float64, dev float64, err error) {
		passes++
		gr, ll, _, err := grad(b)
		if err != nil {
			return nil, 0, fmt.Errorf("score: gradient at chord step %d: %w", passes, err)
		}
		if len(gr) != k {
			panic(fmt.Sprintf("score: gradient returned %d values for k = %d", len(gr), k))
		}
		g = append([]float64(nil), gr...)
		for j := 1; j < k; j++ {
			g[j] -= lambda * b[j]
		}
		return g, penalisedDeviance(ll, b, lambda), nil
	}
	g, dev, err := gradPass(beta)
	if err != nil {
		return nil, nil, passes, err
	}
	// A seed worse than the intercept-only model is FitMomentsFrom's to
	// drop.
	if !(dev <= -2*nullLogLik(n, nTreated)) {
		return newton(start, 0)
	}
	handOver := func(b []float64, steps int) (*Fit, []float64, int, error) {
		return newton(d.original(b), steps)
	}
	steps := 0
	for {
		var sv mat.VecDense
		if err := ch.SolveVecTo(&sv, mat.NewVecDense(k, g)); err != nil {
			return handOver(beta, steps)
		}
		step := make([]float64, k)
		for j := range step {
			step[j] = sv.AtVec(j)
			if math.IsNaN(step[j]) || math.IsInf(step[j], 0) {
				return handOver(beta, steps)
			}
		}
		// Far from the maximum a chord step may overshoot: halve it until
		// the deviance falls, as Newton's line search does.
		next := make([]float64, k)
		var ng []float64
		var ndev, size float64
		improved := false
		for range chordHalvings {
			size = 0
			for j := range next {
				next[j] = beta[j] + step[j]
				size = max(size, math.Abs(step[j])/(1+math.Abs(next[j])))
			}
			ng, ndev, err = gradPass(next)
			if err != nil {
				return nil, nil, passes, err
			}
			if ndev <= dev+1e-11*(math.Abs(dev)+1) {
				improved = true
				break
			}
			for j := range step {
				step[j] /= 2
			}
		}
		if !improved {
			return handOver(beta, steps)
		}
		steps++
		beta, g, dev = next, ng, ndev
		if size < tol {
			break
		}
		if steps >= chordMaxSteps {
			return handOver(beta, steps)
		}
	}
	// One full pass at the result: the information for the standard
	// errors, and the checks of FitMomentsFrom's first and last steps.
	info, gr, ll, _, err := eval(beta)
	if err != nil {
		return nil, nil, passes, fmt.Errorf("score: moments at the chord result: %w", err)
	}
	if len(info) != k*k || len(gr) != k {
		panic(fmt.Sprintf("score: moments returned %d info and %d grad values for k = %d", len(info), len(gr), k))
	}
	mom := moments{info: info, grad: gr, logLik: ll}
	if err := checkCollinear(mom.info, k, names); err != nil {
		return nil, nil, passes, err
	}
	if opt.Model == Logistic && -2*ll < completeDev {
		return handOver(beta, steps)
	}
	exact, ok := newtonStep(&mom, beta, lambda)
	if !ok {
		return handOver(beta, steps)
	}
	for j, s := range exact {
		if math.Abs(s)/(1+math.Abs(beta[j])) >= math.Sqrt(tol) {
			return handOver(beta, steps)
		}
	}
	// The chord result is within about ρ/(1 − ρ)·Tol of the maximum; one
	// exact Newton step from there (quadratic convergence) leaves an error
	// of order that squared, below rounding, so the estimate no longer
	// depends on where the chord iteration stopped. The information it
	// was computed at, and so the standard errors, differ from those at
	// the polished point by a relative O(Tol).
	for j, s := range exact {
		beta[j] += s
	}
	steps++
	fit = &Fit{
		Model:      opt.Model,
		Lambda:     lambda,
		Names:      append([]string{"(intercept)"}, names...),
		Iterations: steps,
		Converged:  true,
		LogLik:     ll,
		NullLogLik: nullLogLik(n, nTreated),
		N:          n,
		NTreated:   nTreated,
	}
	fit.Coef, fit.SE = d.originalScale(beta, &mom, lambda)
	return fit, beta, passes, nil
}

// standardised maps coefficients on the original scale to the
// standardised design: β̃_j = β_j/s_j and β̃_0 = β_0 + Σ_j β_j c_j.
func (d *design) standardised(coef []float64) []float64 {
	b := make([]float64, d.k)
	b[0] = coef[0]
	for j := 1; j < d.k; j++ {
		b[j] = coef[j] / d.invScale[j-1]
		b[0] += coef[j] * d.center[j-1]
	}
	return b
}

// original is the inverse of standardised: β_j = s_j β̃_j and
// β_0 = β̃_0 − Σ_j c_j s_j β̃_j.
func (d *design) original(bt []float64) []float64 {
	c := make([]float64, d.k)
	c[0] = bt[0]
	for j := 1; j < d.k; j++ {
		s := d.invScale[j-1]
		c[j] = s * bt[j]
		c[0] -= d.center[j-1] * s * bt[j]
	}
	return c
}

// SampleInfo approximates the whole cohort's information X̃'WX̃ at coef
// (original scale, intercept first) from a sample of its units: x holds
// the sample's design columns (column-major, as FitModel takes them),
// center and invScale the whole cohort's standardisation, and the sum
// over the sample is multiplied by scale (cohort size / sample size).
// w = e(1 − e) with e = 1/(1 + exp(−η)). The result is k×k row-major with
// the upper triangle filled, FitMomentsChord's startInfo.
func SampleInfo(x [][]float64, coef, center, invScale []float64, scale float64) []float64 {
	k := len(x) + 1
	if len(coef) != k || len(center) != k-1 || len(invScale) != k-1 {
		panic(fmt.Sprintf("score: sample info: %d columns, %d coefficients, %d centres, %d scales", len(x), len(coef), len(center), len(invScale)))
	}
	n := 0
	if len(x) > 0 {
		n = len(x[0])
	}
	info := make([]float64, k*k)
	row := make([]float64, k)
	for i := range n {
		eta := coef[0]
		row[0] = 1
		for j := 1; j < k; j++ {
			v := x[j-1][i]
			eta += coef[j] * v
			row[j] = (v - center[j-1]) * invScale[j-1]
		}
		t := math.Exp(-math.Abs(eta))
		w := t / ((1 + t) * (1 + t))
		for a := range k {
			wa := w * row[a]
			r := info[a*k:]
			for b := a; b < k; b++ {
				r[b] += wa * row[b]
			}
		}
	}
	for i := range info {
		info[i] *= scale
	}
	return info
}
