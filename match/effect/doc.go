// Package effect estimates treatment effects from outcomes, treatment and
// the weights built by the earlier stages, with sandwich standard errors
// and normal confidence intervals.
//
// The estimate is the weighted difference in mean outcomes, treated minus
// control. Whether it is an ATE, ATT, ATC or an effect in the overlap
// population is decided by the weights, not here. Augmented instead takes the
// treatment coefficient of a weighted regression on treatment and covariates
// (regression adjustment). Standard errors treat the
// weights as fixed: they ignore that the propensity score was estimated,
// which is conservative for inverse-probability weighted ATE estimates
// (Lunceford & Davidian 2004, Stat Med 23:2937), and for matched samples
// they are clustered by matched set.
//
// Conventions follow gonum's stat: nil weights mean all ones; a length
// mismatch is a programmer error and panics; bad data (an arm with no
// usable unit, a negative or non-finite weight) is an error value.
//
// This package must not fit propensity models, choose weights, read or
// write databases, or import counterpart/warehouse.
package effect
