// Package balance measures how alike the treated and control arms look on
// each covariate, before and after an adjustment, and judges the result
// against the study's limits.
//
// Every statistic is defined in the doc comment of the function that
// computes it, exactly enough to be recomputed in SQL from the published
// cohort and weights tables (the balance view does so, and the two must
// agree):
//
//   - weighted mean Σw·x/Σw over units with w > 0;
//   - weighted variance with the reliability-weight correction
//     Σw(x−m)²/(Σw − Σw²/Σw), the ordinary n−1 sample variance when all
//     weights are 1;
//   - standardised mean difference with the unadjusted pooled SD as its
//     denominator (Austin 2009; Austin & Stuart 2015), so that before and
//     after adjustment share one yardstick;
//   - variance ratio treated/control of the weighted variances;
//   - weighted Kolmogorov–Smirnov distance of the two arms' distributions.
//
// Conventions follow gonum's stat: nil weights mean all ones, a length
// mismatch is a programmer error and panics. Weights must be finite and
// non-negative (weights.Check validates them); a negative or NaN weight
// panics, because weights are computed by counterpart, not read from the
// user.
//
// This package must not fit models, choose weights, read or write
// databases, or import counterpart/warehouse.
package balance
