// Package survival estimates time-to-event and rate contrasts between a
// treated and a control arm from plain slices: weighted Kaplan–Meier curves
// with horizon survival, risk and restricted mean survival time (RMST), the
// treatment-only weighted Cox proportional-hazards model with model-based,
// robust and cluster-robust standard errors and a Schoenfeld-type check of
// proportional hazards, and weighted Poisson rate ratios and rate
// differences with sandwich standard errors.
//
// Inputs are columns of equal length: time (> 0), event, treated, optional
// weights (nil = all 1) and optional cluster labels (nil = independent
// rows; the rows of one matched set share a label, and a label may span
// both arms). A length mismatch is a programmer error and panics; bad data
// (a non-positive time, a fractional count, a horizon past follow-up) is an
// error whose message counts the offending units, so a caller can refuse
// the study with exit code 2.
//
// KaplanMeierGroups, CoxGroups and RatesGroups take the sums of a grouped
// query instead of rows (arm × time × status; cluster × arm for rates), so
// a warehouse can supply them for any number of units; what needs rows
// (clustered SEs of curves and Cox) is said on each.
//
// Every result is a function of the multiset of rows only: rows are put in
// a canonical order (time, then event, arm, weight and cluster) before any
// sum, so shuffling the input gives bit-identical results.
//
// Variance formulas follow R's survival package (Therneau) and statsmodels
// where those are the references, and each function says which call it
// reproduces. Two families of standard errors are reported side by side:
//
//   - "Greenwood"/model-based: treats weights as frequencies (R survfit with
//     robust = FALSE, coxph's naive.var). Right for unweighted or
//     frequency-weighted data.
//   - "Robust": the infinitesimal jackknife / sandwich from per-row
//     influence, summed within clusters when clusters are given (R survfit
//     robust = TRUE, coxph robust = TRUE / cluster =). Right for estimated
//     weights and for matched sets or reused controls.
//
// This package must not read or write databases, know about studies,
// scores or matching, or print: it is arithmetic a statistician can check
// line by line against the cited formulas.
package survival
