package score

import (
	"errors"
	"fmt"
	"strings"
)

// ErrBadInput is matched (errors.Is) by every error this package returns
// for a problem in the data or the options, as opposed to a bug: the
// command line maps it to exit code 2.
var ErrBadInput = errors.New("bad input")

// NonFiniteError reports a NaN or ±Inf in a design column.
type NonFiniteError struct {
	Column string
	Unit   int // index of the first offending unit
	Value  float64
	Count  int // number of non-finite values in the column
}

func (e *NonFiniteError) Error() string {
	return fmt.Sprintf("score: covariate %s has %d non-finite value(s) (first: %v at unit index %d); fix or exclude them in the cohort SQL",
		e.Column, e.Count, e.Value, e.Unit)
}

// Is makes the error match ErrBadInput.
func (e *NonFiniteError) Is(target error) bool { return target == ErrBadInput }

// ConstantError reports a design column with zero variance: it is
// collinear with the intercept and carries no information.
type ConstantError struct {
	Column string
	Value  float64
}

func (e *ConstantError) Error() string {
	return fmt.Sprintf("score: covariate %s is constant in the cohort (every value is %v); remove it", e.Column, e.Value)
}

// Is makes the error match ErrBadInput.
func (e *ConstantError) Is(target error) bool { return target == ErrBadInput }

// CollinearError reports design columns that are exact linear combinations
// of earlier columns and the intercept, so that X'X is singular and the
// coefficients are not identified. Columns are examined in input order, so
// the later column of a collinear set is the one named in Column.
type CollinearError struct {
	Column string   // the first dependent column
	Of     []string // the earlier columns it is a combination of (with a constant)
	Others []string // further dependent columns, if any
}

func (e *CollinearError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "score: covariate %s is a linear combination of ", e.Column)
	if len(e.Of) == 0 {
		b.WriteString("the intercept")
	} else {
		fmt.Fprintf(&b, "%s and the intercept", strings.Join(e.Of, ", "))
	}
	b.WriteString(" (exact collinearity)")
	if len(e.Others) > 0 {
		fmt.Fprintf(&b, "; so are %s", strings.Join(e.Others, ", "))
	}
	b.WriteString("; remove it or one of the columns it depends on (for a categorical covariate, keep out one level)")
	return b.String()
}

// Is makes the error match ErrBadInput.
func (e *CollinearError) Is(target error) bool { return target == ErrBadInput }

// TreatmentError reports a cohort in which nobody, or everybody, is
// treated (or which is empty): there is no propensity to model.
type TreatmentError struct {
	N, NTreated int
}

func (e *TreatmentError) Error() string {
	switch {
	case e.N == 0:
		return "score: the cohort has no units"
	case e.NTreated == 0:
		return fmt.Sprintf("score: none of the %d units is treated; check the treatment column and the cohort SQL", e.N)
	default:
		return fmt.Sprintf("score: all %d units are treated; the cohort needs untreated comparison units", e.N)
	}
}

// Is makes the error match ErrBadInput.
func (e *TreatmentError) Is(target error) bool { return target == ErrBadInput }

// SeparationError reports (quasi-)complete separation: some linear
// combination of the covariates predicts treatment perfectly for all units
// (complete) or for a subset of them (quasi-complete), so the maximum
// likelihood estimate does not exist and coefficients diverge (Albert &
// Anderson 1984, Biometrika 71:1). The ridge model still has a finite fit.
type SeparationError struct {
	Complete bool
	// Columns are the covariates whose coefficients were diverging fastest
	// (on the standardised scale): the likely culprits, not a proof.
	Columns []string
	// Units is the number of units whose fitted probability was
	// numerically 0 or 1 on the side of their observed treatment.
	Units, N int
}

func (e *SeparationError) Error() string {
	var b strings.Builder
	if e.Complete {
		b.WriteString("score: treatment is perfectly predicted (complete separation)")
	} else {
		fmt.Fprintf(&b, "score: treatment is perfectly predicted for %d of %d units (quasi-complete separation)", e.Units, e.N)
	}
	switch len(e.Columns) {
	case 0:
	case 1:
		fmt.Fprintf(&b, ", likely by column %s", e.Columns[0])
	default:
		fmt.Fprintf(&b, ", likely by columns %s", strings.Join(e.Columns, ", "))
	}
	b.WriteString("; drop or coarsen it, or set score.model: ridge")
	return b.String()
}

// Is makes the error match ErrBadInput.
func (e *SeparationError) Is(target error) bool { return target == ErrBadInput }

// NotConvergedError reports a fit that did not meet the convergence
// criterion within Options.MaxIter Newton steps. FitModel returns the last
// iterate alongside it (with Converged false).
type NotConvergedError struct {
	Model      Model
	Iterations int
	// RelChange is the last relative change in the (penalised) deviance;
	// Step the last scaled coefficient step (see Options.Tol).
	RelChange, Step float64
	Reason          string // optional detail, e.g. a singular information matrix
}

func (e *NotConvergedError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "score: %s model did not converge in %d iterations (relative deviance change %.3g, scaled step %.3g)",
		e.Model, e.Iterations, e.RelChange, e.Step)
	if e.Reason != "" {
		fmt.Fprintf(&b, ": %s", e.Reason)
	}
	if e.Model == Ridge {
		b.WriteString("; allow more iterations or use a larger ridge penalty")
	} else {
		b.WriteString("; simplify the model (drop or coarsen sparse covariates) or set score.model: ridge")
	}
	return b.String()
}

// Is makes the error match ErrBadInput.
func (e *NotConvergedError) Is(target error) bool { return target == ErrBadInput }
