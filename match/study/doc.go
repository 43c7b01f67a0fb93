// Package study runs one study end to end: it parses and validates the
// study file (Spec), opens the warehouse, reads the cohort, drives the
// statistical stages under match/ in order (score, support, matching,
// weights, balance, effects, sensitivity), decides the balance gate and
// hands everything to the warehouse to publish in one transaction. It also
// writes the synthetic demo.
//
// It is the only place that knows the order of the stages; each stage is a
// pure function in its own package. It must not format output for people
// (package report does), parse flags or print (cmd/counterpart does), or
// issue SQL (package warehouse and its engines do).
package study
