// Package score fits the propensity-score model of a study: the probability
// that a unit is treated given its covariates, e(x) = P(Z = 1 | x).
//
// Two models are offered, both with an intercept:
//
//   - Logistic: the maximum-likelihood logistic regression, fitted by
//     Newton's method (iteratively reweighted least squares, McCullagh &
//     Nelder 1989, Generalized Linear Models, 2nd ed.). Its estimates
//     and standard errors are those of R's glm(family = binomial) and
//     statsmodels' Logit. With an intercept the MLE solves the score
//     equations Σ_i x_ij (z_i − e_i) = 0 exactly, which is what makes
//     overlap weights balance every model covariate exactly (Li, Morgan &
//     Zaslavsky 2018).
//   - Ridge: the same likelihood with an L2 penalty on the coefficients of
//     the standardised covariates (le Cessie & van Houwelingen 1992, Applied
//     Statistics 41:191). It always has a finite solution, so it is the
//     fallback when the logistic fit hits separation.
//
// The input is columnar (one []float64 per design column, categorical
// covariates already expanded into dummy columns) because that is how the
// cohort is read. The fitter never copies the whole design: each iteration
// streams it in chunks of rows, accumulates X'WX with a BLAS rank-k update
// and X'(z − e) with a matrix–vector product, and spreads the chunks over
// runtime.GOMAXPROCS goroutines. Partial sums are added in a fixed block
// order, so a fit gives bit-identical results whatever the number of cores.
//
// Problems in the data are reported as typed errors naming the column at
// fault (NonFiniteError, ConstantError, CollinearError, TreatmentError,
// SeparationError, NotConvergedError); all of them match ErrBadInput with
// errors.Is, which the command line maps to exit code 2.
//
// The package is pure computation over slices: it must not touch databases,
// files, flags or the terminal, and must not import counterpart/warehouse.
package score
