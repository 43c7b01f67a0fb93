// Package weights turns propensity scores and matched sets into per-unit
// weights for the later balance and effect stages.
//
// Every scheme is a closed-form function of the score e = P(Z=1 | X) and the
// treatment indicator Z, written with its formula and source in its doc
// comment so that a statistician can check it line by line against the
// paper, and so that the same weight can be recomputed in SQL from the
// published scores table.
//
// Conventions (as in gonum's stat): slices are parallel, one entry per unit;
// a length mismatch is a programmer error and panics. The formula functions
// follow IEEE arithmetic: a score of exactly 0 or 1 gives an infinite
// weight. Scores come from the data, so callers validate them first with
// CheckScores and validate the finished weights with Check, which return
// error values naming the offending unit.
//
// Units outside common support get weight 0 through Restrict, applied after
// the scheme; later stages ignore zero-weight units.
//
// This package must not fit models, read or write databases, or import
// counterpart/warehouse: it is a pure function of plain slices.
package weights
