package score

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Model selects the propensity model.
type Model int

const (
	// Logistic is maximum-likelihood logistic regression.
	Logistic Model = iota
	// Ridge is L2-penalised logistic regression (see Options.Lambda).
	Ridge
)

// String returns the spelling used in study files: "logistic" or "ridge".
func (m Model) String() string {
	switch m {
	case Logistic:
		return "logistic"
	case Ridge:
		return "ridge"
	}
	return fmt.Sprintf("Model(%d)", int(m))
}

// ParseModel is the inverse of Model.String.
func ParseModel(s string) (Model, error) {
	switch s {
	case "logistic":
		return Logistic, nil
	case "ridge":
		return Ridge, nil
	}
	return 0, fmt.Errorf("score: %w: unknown model %q (want logistic or ridge)", ErrBadInput, s)
}

// Defaults for the zero values of Options.
const (
	DefaultLambda  = 1.0
	DefaultMaxIter = 50
	DefaultTol     = 1e-10
)

// Options configure FitModel. The zero value fits a logistic model.
type Options struct {
	Model Model
	// Lambda is the ridge penalty; it must be 0 for Logistic. Ridge
	// maximises
	//
	//	ℓ(β̃) − (Lambda/2)·Σ_{j≥1} β̃_j²,
	//
	// where ℓ is the logistic log-likelihood and β̃_j the coefficient of
	// column j standardised over all units as (x_j − mean_j)/sd_j with the
	// population SD, sd_j = √(Σ_i (x_ij − mean_j)²/n). The intercept is
	// never penalised. The penalty is not divided by n: Lambda = 1
	// (DefaultLambda, used when Lambda is 0) is the N(0, 1) prior on the
	// log odds ratio per SD of each covariate, weakly informative, so it
	// moves well-estimated coefficients little in large cohorts but keeps
	// separated ones finite.
	Lambda float64
	// MaxIter bounds the number of Newton steps; 0 means DefaultMaxIter.
	MaxIter int
	// Tol is the convergence tolerance; 0 means DefaultTol. A fit has
	// converged when, after a Newton step δ (on the standardised scale),
	// both hold:
	//
	//	|D_k − D_{k−1}| / (|D_k| + 0.1) < Tol               (as R's glm.control)
	//	max_j |δ_j| / (1 + |β̃_j|)       < √Tol
	//
	// with D the (penalised) deviance −2ℓ + Lambda·Σβ̃_j². Newton's error
	// after a step of size s is of order s², so √Tol on the step gives
	// coefficients accurate to about Tol; the step test also keeps a
	// diverging fit (separation), whose deviance flattens while its
	// coefficients keep growing, from passing as converged.
	Tol float64
	// Check, when set, is called between chunks of every pass over the
	// data; a non-nil error stops the fit and FitModel returns it
	// unwrapped. Workers call it concurrently. It is how a caller cancels a long fit (a signal) without
	// this package knowing about contexts or runs.
	Check func() error
	// OnPass, when set, is told after each accepted Newton step: its
	// number (from 1) and the (penalised) deviance. It is for progress
	// display and must be cheap.
	OnPass func(pass int, deviance float64)
}

func (o Options) resolve() (lambda float64, maxIter int, tol float64, err error) {
	bad := func(format string, a ...any) error {
		return fmt.Errorf("score: %w: "+format, append([]any{ErrBadInput}, a...)...)
	}
	switch o.Model {
	case Logistic:
		if o.Lambda != 0 {
			return 0, 0, 0, bad("a ridge penalty (Lambda = %g) was given for the logistic model; use the ridge model or drop it", o.Lambda)
		}
	case Ridge:
		lambda = o.Lambda
		if lambda == 0 {
			lambda = DefaultLambda
		}
		if !(lambda > 0) || math.IsInf(lambda, 0) {
			return 0, 0, 0, bad("ridge penalty Lambda must be a positive number, got %g", o.Lambda)
		}
	default:
		return 0, 0, 0, bad("unknown model %v", o.Model)
	}
	maxIter = o.MaxIter
	if maxIter == 0 {
		maxIter = DefaultMaxIter
	}
	if maxIter < 0 {
		return 0, 0, 0, bad("MaxIter must be ≥ 0, got %d", o.MaxIter)
	}
	tol = o.Tol
	if tol == 0 {
		tol = DefaultTol
	}
	if !(tol > 0 && tol < 1) {
		return 0, 0, 0, bad("Tol must be in (0, 1), got %g", o.Tol)
	}
	return lambda, maxIter, tol, nil
}

// Fit is a fitted propensity model. Coefficients and standard errors are on
// the original scale of the columns, intercept first.
type Fit struct {
	Model  Model
	Lambda float64 // penalty used (0 for Logistic)

	Names []string // "(intercept)", then the column names
	Coef  []float64
	// SE are √diag of the inverse information at the estimate,
	// (X'WX)⁻¹ with w = e(1 − e) (observed = expected information for the
	// logit link), as reported by R's glm and statsmodels' Logit. For
	// Ridge it is the inverse of the penalised information X̃'WX̃ + Lambda·P
	// (P = identity with a 0 for the intercept) mapped back to the
	// original scale: the SD of the Gaussian (Laplace) approximation to the
	// posterior under the prior Lambda stands for. It ignores the shrinkage
	// bias; it is not a frequentist sandwich.
	SE []float64

	Iterations int  // Newton steps taken
	Converged  bool // false only alongside a *NotConvergedError

	// LogLik is the unpenalised log-likelihood Σ z_i η_i − log(1 + e^η_i)
	// at the estimate (also for Ridge); NullLogLik that of the
	// intercept-only model, n₁ log(n₁/n) + n₀ log(n₀/n).
	LogLik, NullLogLik float64
	N, NTreated        int

	// PS is the fitted probability of treatment per unit, 1/(1 + e^−η).
	PS []float64
	// Logit is the linear predictor η = β₀ + Σ β_j x_j itself, not
	// log(PS/(1−PS)), so that it keeps full precision where PS rounds to
	// 0 or 1.
	Logit []float64
}

// Thresholds for diagnosing separation.
const (
	// sepEta is the |η| beyond which a unit counts as perfectly predicted
	// (fitted probability within 3e-7 of its treatment).
	sepEta = 15
	// completeDev is the deviance below which every unit is perfectly
	// predicted: with overlap anywhere the minimal deviance is of order 1.
	completeDev = 1e-6
	// maxHalvings bounds the step-halving line search.
	maxHalvings = 30
)

// FitModel fits the propensity model P(z_i = 1) = 1/(1 + exp(−η_i)),
// η_i = β₀ + Σ_j β_j x[j][i], by Newton's method on the standardised design
// (McCullagh & Nelder 1989, Generalized Linear Models, 2nd ed.):
//
//	β̃ ← β̃ + (X̃'WX̃ + λP)⁻¹ (X̃'(z − e) − λPβ̃),   W = diag(e_i(1 − e_i)),
//
// with λ = 0 for Logistic, starting from the intercept-only fit and halving
// a step that does not lower the (penalised) deviance. x holds the design
// columns without the intercept, x[j][i] = column j at unit i; names names
// them. The design is standardised internally (see Options.Lambda) for
// conditioning and for the ridge penalty; results are on the original scale.
//
// Lengths that do not match (names vs x, a column vs z) are programmer
// errors and panic. Problems with the data are returned as the typed errors
// of this package: NonFiniteError, ConstantError, CollinearError,
// TreatmentError, SeparationError (Logistic only) and NotConvergedError; a
// bad Options value as an error wrapping ErrBadInput. With a
// *NotConvergedError the last iterate is returned too; with every other
// error the *Fit is nil.
func FitModel(x [][]float64, names []string, z []bool, opt Options) (*Fit, error) {
	if len(names) != len(x) {
		panic(fmt.Sprintf("score: %d names for %d columns", len(names), len(x)))
	}
	n := len(z)
	for j, col := range x {
		if len(col) != n {
			panic(fmt.Sprintf("score: column %s has %d values for %d units", names[j], len(col), n))
		}
	}
	lambda, maxIter, tol, err := opt.resolve()
	if err != nil {
		return nil, err
	}
	nt := 0
	for _, t := range z {
		if t {
			nt++
		}
	}
	if nt == 0 || nt == n {
		return nil, &TreatmentError{N: n, NTreated: nt}
	}
	center, invScale, err := columnStats(x, names)
	if err != nil {
		return nil, err
	}
	k := len(x) + 1
	d := &design{cols: x, names: names, center: center, invScale: invScale, z: z, n: n, k: k, check: opt.Check}
	eta := make([]float64, n)

	objective := func(m *moments, b []float64) float64 { return penalisedDeviance(m.logLik, b, lambda) }
	perfect := func() int {
		c := 0
		for i, h := range eta {
			if (z[i] && h > sepEta) || (!z[i] && h < -sepEta) {
				c++
			}
		}
		return c
	}

	// Start at the intercept-only MLE: the weights are then all equal, so
	// the first information matrix is a multiple of X̃'X̃ and also serves
	// the collinearity check.
	beta := make([]float64, k)
	beta[0] = math.Log(float64(nt) / float64(n-nt))
	mom, err := d.pass(beta, eta)
	if err != nil {
		return nil, err
	}
	if err := checkCollinear(mom.info, k, names); err != nil {
		return nil, err
	}
	dev := objective(&mom, beta)

	relChange, stepSize := math.Inf(1), math.Inf(1)
	var lastStep []float64
	it := 0
	var notConv string
	for {
		if opt.Model == Logistic {
			if -2*mom.logLik < completeDev {
				return nil, d.separation(true, n, lastStep)
			}
			// The deviance has stopped moving but the coefficients have
			// not: they are running off to infinity.
			if it > 0 && relChange < tol && stepSize >= math.Sqrt(tol) {
				if c := perfect(); c > 0 {
					return nil, d.separation(c == n, c, lastStep)
				}
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
		// Step halving: the (penalised) log-likelihood is concave, so a
		// short enough Newton step always improves it.
		next := make([]float64, k)
		var nmom moments
		var ndev float64
		improved := false
		for range maxHalvings {
			for j := range next {
				next[j] = beta[j] + step[j]
			}
			if nmom, err = d.pass(next, eta); err != nil {
				return nil, err
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
			// Restore η at the last accepted β̃.
			if mom, err = d.pass(beta, eta); err != nil {
				return nil, err
			}
			notConv = "no step along the Newton direction lowers the deviance"
			break
		}
		it++
		relChange = math.Abs(ndev-dev) / (math.Abs(ndev) + 0.1)
		stepSize = 0
		for j, s := range step {
			stepSize = max(stepSize, math.Abs(s)/(1+math.Abs(next[j])))
		}
		beta, mom, dev, lastStep = next, nmom, ndev, step
		if opt.OnPass != nil {
			opt.OnPass(it, dev)
		}
	}

	if notConv != "" && opt.Model == Logistic {
		// Out of iterations with a flat deviance and perfectly predicted
		// units: separation that had not yet been recognised.
		if c := perfect(); c > 0 && relChange < math.Sqrt(tol) {
			return nil, d.separation(c == n, c, lastStep)
		}
	}

	fit := &Fit{
		Model:      opt.Model,
		Lambda:     lambda,
		Names:      append([]string{"(intercept)"}, names...),
		Iterations: it,
		Converged:  notConv == "",
		LogLik:     mom.logLik,
		NullLogLik: nullLogLik(n, nt),
		N:          n,
		NTreated:   nt,
		Logit:      eta,
		PS:         make([]float64, n),
	}
	for i, h := range eta {
		fit.PS[i] = logistic(h)
	}
	fit.Coef, fit.SE = d.originalScale(beta, &mom, lambda)
	if notConv != "" {
		return fit, &NotConvergedError{Model: opt.Model, Iterations: it, RelChange: relChange, Step: stepSize, Reason: notConv}
	}
	return fit, nil
}

// logistic returns 1/(1 + e^−h) without overflow.
func logistic(h float64) float64 {
	if h >= 0 {
		return 1 / (1 + math.Exp(-h))
	}
	t := math.Exp(h)
	return t / (1 + t)
}

// penalised returns the upper triangle of X̃'WX̃ + λP as a SymDense.
func penalised(m *moments, k int, lambda float64) *mat.SymDense {
	h := make([]float64, k*k)
	copy(h, m.info)
	for j := 1; j < k; j++ {
		h[j*k+j] += lambda
	}
	return mat.NewSymDense(k, h)
}

// newtonStep solves (X̃'WX̃ + λP) δ = X̃'(z − e) − λPβ̃ by Cholesky; ok is
// false when the matrix is not numerically positive definite.
func newtonStep(m *moments, beta []float64, lambda float64) (step []float64, ok bool) {
	k := len(beta)
	var ch mat.Cholesky
	if !ch.Factorize(penalised(m, k, lambda)) {
		return nil, false
	}
	g := make([]float64, k)
	copy(g, m.grad)
	for j := 1; j < k; j++ {
		g[j] -= lambda * beta[j]
	}
	var s mat.VecDense
	if err := ch.SolveVecTo(&s, mat.NewVecDense(k, g)); err != nil {
		// A condition number past 1/ε: the step would be noise.
		return nil, false
	}
	step = make([]float64, k)
	for j := range step {
		step[j] = s.AtVec(j)
		if math.IsNaN(step[j]) || math.IsInf(step[j], 0) {
			return nil, false
		}
	}
	return step, true
}

// originalScale maps coefficients and covariance from the standardised
// design back to the original columns. With x̃_j = (x_j − c_j)·s_j,
// β = Aβ̃ where β_j = s_j β̃_j and β₀ = β̃₀ − Σ_j c_j s_j β̃_j, so
// Cov(β) = A Cov(β̃) A'.
func (d *design) originalScale(bt []float64, m *moments, lambda float64) (coef, se []float64) {
	k := d.k
	coef = make([]float64, k)
	a0 := make([]float64, k) // row 0 of A
	a0[0] = 1
	coef[0] = bt[0]
	for j := 1; j < k; j++ {
		s := d.invScale[j-1]
		coef[j] = s * bt[j]
		a0[j] = -d.center[j-1] * s
		coef[0] += a0[j] * bt[j]
	}
	se = make([]float64, k)
	var ch mat.Cholesky
	var cov mat.SymDense
	if !ch.Factorize(penalised(m, k, lambda)) || ch.InverseTo(&cov) != nil {
		for j := range se {
			se[j] = math.NaN()
		}
		return coef, se
	}
	var v0 float64
	for a := range k {
		for b := range k {
			v0 += a0[a] * cov.At(a, b) * a0[b]
		}
	}
	se[0] = math.Sqrt(v0)
	for j := 1; j < k; j++ {
		se[j] = d.invScale[j-1] * math.Sqrt(cov.At(j, j))
	}
	return coef, se
}

// separation builds the SeparationError, naming the columns whose
// standardised coefficients moved most in the last Newton step (at least
// half the largest move, at most three): along a separating direction the
// Newton steps have nearly constant length, so the last step points along it.
func (d *design) separation(complete bool, units int, step []float64) *SeparationError {
	e := &SeparationError{Complete: complete, Units: units, N: d.n}
	if len(step) < 2 {
		return e
	}
	var big float64
	for _, s := range step[1:] {
		big = max(big, math.Abs(s))
	}
	if big == 0 {
		return e
	}
	type cand struct {
		j int
		s float64
	}
	var cs []cand
	for j, s := range step[1:] {
		if math.Abs(s) >= big/2 {
			cs = append(cs, cand{j, math.Abs(s)})
		}
	}
	// Largest first; few candidates, so insertion sort.
	for i := 1; i < len(cs); i++ {
		for j := i; j > 0 && cs[j].s > cs[j-1].s; j-- {
			cs[j], cs[j-1] = cs[j-1], cs[j]
		}
	}
	for i := 0; i < len(cs) && i < 3; i++ {
		e.Columns = append(e.Columns, d.names[cs[i].j])
	}
	return e
}

// penalisedDeviance is −2ℓ + λΣ_{j≥1} β̃_j², what every fitting driver
// minimises (the intercept is not penalised).
func penalisedDeviance(logLik float64, beta []float64, lambda float64) float64 {
	var s float64
	for _, v := range beta[1:] {
		s += v * v
	}
	return -2*logLik + lambda*s
}

// nullLogLik is the intercept-only model's log-likelihood,
// n₁ log(n₁/n) + n₀ log(n₀/n).
func nullLogLik(n, nt int) float64 {
	return float64(nt)*math.Log(float64(nt)/float64(n)) + float64(n-nt)*math.Log(float64(n-nt)/float64(n))
}
