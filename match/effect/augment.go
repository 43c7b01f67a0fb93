package effect

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/mat"
)

// Method names of the regression-adjusted estimate.
const (
	MethodAugmentedHC0 = "weighted regression of outcome on treatment and covariates, HC0 sandwich SE"
	MethodAugmentedCR  = "weighted regression of outcome on treatment and covariates, cluster-robust sandwich SE (CR0 × G/(G−1))"
)

// ErrCollinear marks a covariate that is constant, or a linear combination
// of the intercept, the treatment indicator and the covariates before it,
// among the rows used: its coefficient, and with it the adjusted effect,
// is not identified.
var ErrCollinear = errors.New("collinear covariate")

// collinearTol is the smallest 1 − R² of a covariate regressed (weighted)
// on the columns before it that Augmented accepts. Below it the normal
// equations lose about ten of their sixteen digits and the covariate is
// treated as a linear combination of the others (common practice: a
// relative pivot tolerance in a Cholesky or QR rank check).
const collinearTol = 1e-10

// augmentChunk is the number of rows gathered into one block of the
// design before it is added to X'WX with a rank-k update.
const augmentChunk = 1024

// Augmented returns the regression-adjusted effect: the coefficient of z in
// the weighted least-squares regression of y on [1, z, x_1 … x_p] with
// weights w,
//
//	β̂ = (X'WX)⁻¹ X'Wy,   τ̂ = β̂_z.
//
// With weights from a propensity score this is the weighted regression
// estimator that is consistent when either the score or the linear outcome
// model is right (doubly robust in the sense of Kang & Schafer 2007, Stat
// Sci 22:523, §2; Robins et al. 2007, Stat Sci 22:544); with balancing
// weights the covariates mop up what imbalance is left and usually shrink
// the standard error.
//
// The standard error is the z-entry of the sandwich of that regression,
// with the weights treated as fixed as in Difference. With cluster nil it
// is HC0 (White 1980, Econometrica 48:817),
//
//	V = (X'WX)⁻¹ (Σ_i w_i² e_i² x_i x_i') (X'WX)⁻¹,
//
// e_i = y_i − x_i'β̂; otherwise it is the cluster sandwich (Liang & Zeger
// 1986, Biometrika 73:13) with the meat Σ_g u_g u_g', u_g = Σ_{i∈g} w_i e_i
// x_i over the G clusters with a usable row, times G/(G−1) — the
// convention of ClusteredDifference. Only the z-row a' of (X'WX)⁻¹ is
// needed: Var(τ̂) = Σ_i (w_i e_i a'x_i)², or Σ_g (Σ_{i∈g} w_i e_i a'x_i)²
// times G/(G−1).
//
// x holds the covariates by column, x[j][i] the j-th covariate of row i;
// each column must be as long as y, and cluster nil or as long as y
// (otherwise Augmented panics). With no covariates Augmented returns
// exactly Difference (cluster nil) or ClusteredDifference, whose closed
// forms are this regression's solution.
//
// Rows, weights and outcomes are treated as in Difference: w = 0 rows are
// ignored, rows with positive weight and a NaN outcome are left out and
// counted in NMissing, nil weights mean all ones. A covariate that is NaN
// or infinite on a usable row is an error naming the row and column (drop
// or impute such rows first). A covariate constant among the usable rows,
// or collinear with the intercept, z and the covariates before it, gives
// an error wrapping ErrCollinear that names its column index j (0-based,
// x[j]).
//
// Covariates are centred at their weighted means and scaled to unit
// weighted standard deviation, and y centred, before X'WX is formed; this
// leaves τ̂ and its sandwich SE unchanged (the transformation does not
// touch the z column) and keeps the normal equations well conditioned.
// X'WX is accumulated in blocks of rows, so memory is O(n) for the row
// index plus O(p²), never an n×p copy.
func Augmented(y []float64, z []bool, w []float64, x [][]float64, cluster []int) (Estimate, error) {
	const step = "augmented"
	checkAugmentLengths(step, y, z, w, x, cluster)
	if len(x) == 0 {
		if cluster == nil {
			return Difference(y, z, w)
		}
		return ClusteredDifference(y, z, w, cluster)
	}
	return augment(step, y, z, w, x, cluster)
}

func checkAugmentLengths(step string, y []float64, z []bool, w []float64, x [][]float64, cluster []int) {
	if len(z) != len(y) || (w != nil && len(w) != len(y)) {
		panic(fmt.Sprintf("effect: %s: len(y) = %d, len(z) = %d, len(w) = %d", step, len(y), len(z), len(w)))
	}
	for j, col := range x {
		if len(col) != len(y) {
			panic(fmt.Sprintf("effect: %s: len(y) = %d, len(x[%d]) = %d", step, len(y), j, len(col)))
		}
	}
	if cluster != nil && len(cluster) != len(y) {
		panic(fmt.Sprintf("effect: %s: len(y) = %d, len(cluster) = %d", step, len(y), len(cluster)))
	}
}

// augment is Augmented's general path, also used with no covariates by
// the tests to check it against Difference's closed form.
func augment(step string, y []float64, z []bool, w []float64, x [][]float64, cluster []int) (Estimate, error) {
	a, err := summarise(step, y, z, w)
	if err != nil {
		return Estimate{}, err
	}
	idx := make([]int, 0, a.nT+a.nC)
	for i := range y {
		if use(y, w, i) {
			idx = append(idx, i)
		}
	}
	sumW := a.sumT + a.sumC
	ybar := (a.sumT*a.meanT + a.sumC*a.meanC) / sumW

	// Weighted mean and SD of each covariate over the usable rows, from
	// deviations to the first usable value: a constant column then has a
	// variance of exactly 0.
	p := len(x)
	center, scale := make([]float64, p), make([]float64, p)
	for j, col := range x {
		shift := col[idx[0]]
		var s float64
		for _, i := range idx {
			v := col[i]
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return Estimate{}, fmt.Errorf("effect: %s: row %d has covariate column %d = %v; covariates must be finite on rows with positive weight and an observed outcome", step, i, j, v)
			}
			s += weight(w, i) * (v - shift)
		}
		m := shift + s/sumW
		var ss float64
		for _, i := range idx {
			d := col[i] - m
			ss += weight(w, i) * d * d
		}
		if ss == 0 {
			return Estimate{}, fmt.Errorf("effect: %s: covariate column %d is constant among the rows used (positive weight, observed outcome); drop it: %w", step, j, ErrCollinear)
		}
		center[j], scale[j] = m, 1/math.Sqrt(ss/sumW)
	}

	// X'WX and X'W(y − ȳ) in blocks: the block holds k rows of m
	// columns, row c being design column c over the block's rows, each
	// multiplied by √w so that one rank-m update adds Σ w x x'.
	k := p + 2
	xtx := make([]float64, k*k)
	xty := make([]float64, k)
	buf := make([]float64, k*augmentChunk)
	sy := make([]float64, augmentChunk)
	sw := make([]float64, augmentChunk)
	for lo := 0; lo < len(idx); lo += augmentChunk {
		rows := idx[lo:min(lo+augmentChunk, len(idx))]
		m := len(rows)
		for r, i := range rows {
			s := math.Sqrt(weight(w, i))
			sw[r] = s
			sy[r] = s * (y[i] - ybar)
			buf[r] = s
			if z[i] {
				buf[m+r] = s
			} else {
				buf[m+r] = 0
			}
		}
		for j, col := range x {
			row := buf[(j+2)*m : (j+3)*m]
			c, sc := center[j], scale[j]
			for r, i := range rows {
				row[r] = (col[i] - c) * sc * sw[r]
			}
		}
		blk := blas64.General{Rows: k, Cols: m, Stride: m, Data: buf[:k*m]}
		blas64.Syrk(blas.NoTrans, 1, blk, 1, blas64.Symmetric{Uplo: blas.Upper, N: k, Stride: k, Data: xtx})
		blas64.Gemv(blas.NoTrans, 1, blk, blas64.Vector{N: m, Data: sy[:m], Inc: 1}, 1, blas64.Vector{N: k, Data: xty, Inc: 1})
	}
	xwx := mat.NewSymDense(k, xtx) // reads the upper triangle only

	var chol mat.Cholesky
	ok := chol.Factorize(xwx)
	if j, r2 := dependentColumn(xwx, &chol, ok); j >= 0 {
		return Estimate{}, collinearError(step, j, r2)
	}
	var beta, arow mat.VecDense
	if err := chol.SolveVecTo(&beta, mat.NewVecDense(k, xty)); err != nil {
		return Estimate{}, fmt.Errorf("effect: %s: solve normal equations: %w", step, err)
	}
	unit := mat.NewVecDense(k, nil)
	unit.SetVec(1, 1)
	if err := chol.SolveVecTo(&arow, unit); err != nil {
		return Estimate{}, fmt.Errorf("effect: %s: invert X'WX: %w", step, err)
	}
	b, av := beta.RawVector().Data, arow.RawVector().Data

	// Per usable row, the z-entry's influence term w_i e_i a'x_i, built
	// column by column over each block as X'WX was.
	res := sy // reuse: residual e_i
	lin := sw // reuse: a'x_i
	var slot map[int]int
	var score []float64
	if cluster != nil {
		slot = make(map[int]int)
	}
	var v float64
	for lo := 0; lo < len(idx); lo += augmentChunk {
		rows := idx[lo:min(lo+augmentChunk, len(idx))]
		for r, i := range rows {
			res[r] = y[i] - ybar - b[0]
			lin[r] = av[0]
			if z[i] {
				res[r] -= b[1]
				lin[r] += av[1]
			}
		}
		for j, col := range x {
			c, sc, bj, aj := center[j], scale[j], b[j+2], av[j+2]
			for r, i := range rows {
				t := (col[i] - c) * sc
				res[r] -= bj * t
				lin[r] += aj * t
			}
		}
		for r, i := range rows {
			d := weight(w, i) * res[r] * lin[r]
			if cluster == nil {
				v += d * d
				continue
			}
			// Clusters in order of first appearance, as in
			// ClusteredDifference, so sums do not depend on map order.
			g, ok := slot[cluster[i]]
			if !ok {
				g = len(score)
				slot[cluster[i]] = g
				score = append(score, 0)
			}
			score[g] += d
		}
	}
	method := MethodAugmentedHC0
	if cluster != nil {
		g := len(score)
		if g < 2 {
			return Estimate{}, fmt.Errorf("effect: %s: %d cluster(s) with usable rows; a cluster-robust SE needs at least 2", step, g)
		}
		for _, s := range score {
			v += s * s
		}
		v *= float64(g) / float64(g-1)
		method = MethodAugmentedCR
	}

	e := Estimate{
		Estimate: b[1],
		SE:       math.Sqrt(v),
		NTreated: a.nT, NControl: a.nC, NMissing: a.miss,
		Method: method,
	}
	e.CILow = e.Estimate - ZCrit*e.SE
	e.CIHigh = e.Estimate + ZCrit*e.SE
	e.Z = e.Estimate / e.SE
	e.P = math.Erfc(math.Abs(e.Z) / math.Sqrt2)
	return e, nil
}

// collinearError names design column c (0 intercept, 1 treatment, 2+j
// covariate j) and what it is collinear with.
func collinearError(step string, c int, r2 float64) error {
	var with string
	switch {
	case c < 2:
		return fmt.Errorf("effect: %s: the treatment indicator is collinear with the intercept among the rows used: %w", step, ErrCollinear)
	case c == 2:
		with = "the intercept and the treatment"
	default:
		with = fmt.Sprintf("the intercept, the treatment and covariate columns 0–%d", c-3)
	}
	return fmt.Errorf("effect: %s: covariate column %d is collinear with %s among the rows used (1 − R² = %.3g); drop it: %w", step, c-2, with, r2, ErrCollinear)
}

// dependentColumn returns the first covariate column c ≥ 2 of the design
// whose 1 − R² on the columns before it, U_cc²/A_cc with U the Cholesky
// factor of A = X'WX, is below collinearTol, and that ratio; or −1. The
// covariate columns are centred, so A_cc is their weighted sum of squared
// deviations and the ratio is the usual 1 − R² with an intercept. When the
// full factorisation failed, leading blocks are factorised one by one to
// find the first column that breaks it.
func dependentColumn(a *mat.SymDense, full *mat.Cholesky, ok bool) (int, float64) {
	k := a.SymmetricDim()
	if ok {
		var u mat.TriDense
		full.UTo(&u)
		for c := 2; c < k; c++ {
			if r := u.At(c, c) * u.At(c, c) / a.At(c, c); r < collinearTol {
				return c, r
			}
		}
		return -1, 0
	}
	for c := 2; c < k; c++ {
		var ch mat.Cholesky
		if !ch.Factorize(a.SliceSym(0, c+1).(*mat.SymDense)) {
			return c, 0
		}
		var u mat.TriDense
		ch.UTo(&u)
		if r := u.At(c, c) * u.At(c, c) / a.At(c, c); r < collinearTol {
			return c, r
		}
	}
	// Only the intercept and z can be left; summarise guarantees both arms
	// have positive weight, so this is not reached in exact arithmetic.
	return 1, 0
}
