package warehouse

import (
	"fmt"
	"strings"
)

// ColType is an engine-neutral column type of the output contract. Each
// engine maps it to its own type name (DuckDB DOUBLE, Postgres double
// precision, ...).
type ColType int

const (
	TypeText ColType = iota
	TypeBigInt
	TypeDouble
	TypeBool
	TypeTimestampTZ
	TypeJSON
)

// Column is one column of a contract table.
type Column struct {
	Name    string
	Type    ColType
	Comment string
}

// Table is one table of the output contract.
type Table struct {
	// Name is the table's name in the database, prefix included.
	Name    string
	Comment string
	Columns []Column
}

// Contract names every object a study writes in its output schema and the
// columns of each table. It is shared by the engines so that "the tables of
// the contract" (README.md) mean the same thing on each of them.
type Contract struct {
	Schema string
	// Tables, in creation order: runs, cohort, scores, matches, weights.
	Runs, Cohort, Scores, Matches, Weights Table
	// Views over the latest succeeded run, and the balance views.
	CurrentCohort, CurrentScores, CurrentMatches, CurrentWeights string
	Balance, BalanceHistory                                      string
	// Unit and Treatment are the source names of the unit and treatment
	// columns, used as column names in the cohort snapshot (and the unit's
	// in scores, matches and weights).
	Unit, Treatment string
}

// Tables lists the contract's tables in creation order.
func (c *Contract) Tables() []*Table {
	return []*Table{&c.Runs, &c.Cohort, &c.Scores, &c.Matches, &c.Weights}
}

// NewContract validates every name in out (schema, prefix, columns, schemes)
// and describes the tables and views. Names that are not valid identifiers
// or that would give a table two columns of the same name are errors
// wrapping ErrBadInput that name the offender.
func NewContract(out Output) (*Contract, error) {
	if err := ValidIdent(out.Schema); err != nil {
		return nil, fmt.Errorf("output.schema: %w", err)
	}
	if out.Prefix != "" && strings.Trim(out.Prefix, "abcdefghijklmnopqrstuvwxyz0123456789_") != "" {
		return nil, fmt.Errorf("output.prefix %q: %w: use only lower-case letters, digits and _", out.Prefix, ErrBadInput)
	}
	c := &Contract{Schema: out.Schema, Unit: out.Unit, Treatment: out.Treatment}
	names := []struct {
		p    *string
		base string
	}{
		{&c.Runs.Name, "runs"}, {&c.Cohort.Name, "cohort"}, {&c.Scores.Name, "scores"},
		{&c.Matches.Name, "matches"}, {&c.Weights.Name, "weights"},
		{&c.CurrentCohort, "current_cohort"}, {&c.CurrentScores, "current_scores"},
		{&c.CurrentMatches, "current_matches"}, {&c.CurrentWeights, "current_weights"},
		{&c.Balance, "balance"}, {&c.BalanceHistory, "balance_history"},
	}
	for _, n := range names {
		*n.p = out.Prefix + n.base
		if err := ValidIdent(*n.p); err != nil {
			return nil, fmt.Errorf("output.prefix %q gives the object name %s: %w", out.Prefix, *n.p, err)
		}
	}

	unitType := TypeBigInt
	if out.IDKind == IDText {
		unitType = TypeText
	}
	unit := Column{out.Unit, unitType, fmt.Sprintf("unit identifier: source column %s of the cohort query", out.Unit)}
	runID := Column{"run_id", TypeText, "run that wrote the row; joins to " + c.Runs.Name + ".run_id"}
	treated := Column{"treated", TypeBool, "true for a treated unit, false for a comparison unit"}

	c.Runs.Comment = "One row per run of study " + out.Study + ": status, lineage and JSON summaries. Rows of other tables join on run_id."
	c.Runs.Columns = []Column{
		{"run_id", TypeText, "unique id of the run"},
		{"study", TypeText, "study name from the study file"},
		{"status", TypeText, "running, succeeded, rejected (balance gate failed; rows kept for inspection), failed or skipped"},
		{"started_at", TypeTimestampTZ, "when the run started"},
		{"finished_at", TypeTimestampTZ, "when the run finished; NULL while running"},
		{"tool_version", TypeText, "counterpart version that wrote the run"},
		{"spec_sha256", TypeText, "SHA-256 of the study file as read"},
		{"spec", TypeJSON, "the study specification, credentials removed"},
		{"cohort_sql", TypeText, "the cohort query as run"},
		{"cohort_fingerprint", TypeText, "fingerprint of the cohort data read"},
		{"counts", TypeJSON, "unit counts: read, treated, control, in support, matched"},
		{"model", TypeJSON, "propensity model: coefficients and diagnostics"},
		{"balance", TypeJSON, "balance summary and gate decision"},
		{"effects", TypeJSON, "effect estimates with uncertainty and sensitivity"},
		{"engine", TypeText, "warehouse engine"},
		{"db_user", TypeText, "database user that ran the study"},
		{"message", TypeText, "why the run failed, was rejected or skipped; warnings"},
	}

	c.Cohort.Comment = "Snapshot of the cohort each run analysed, one row per run and unit, so a run can be reproduced."
	c.Cohort.Columns = []Column{runID, unit,
		{out.Treatment, TypeBool, fmt.Sprintf("treatment: source column %s read as true/false", out.Treatment)}}
	for _, cv := range out.Covariates {
		if cv.Kind == Categorical {
			c.Cohort.Columns = append(c.Cohort.Columns, Column{cv.Name, TypeText, "categorical covariate: the level as text"})
		} else {
			c.Cohort.Columns = append(c.Cohort.Columns, Column{cv.Name, TypeDouble, "numeric covariate"})
		}
	}
	for _, o := range out.Outcomes {
		c.Cohort.Columns = append(c.Cohort.Columns, Column{o, TypeDouble, "outcome; NULL where missing, booleans as 0/1"})
	}

	c.Scores.Comment = "Propensity score of every unit of the run."
	c.Scores.Columns = []Column{runID, unit, treated,
		{"ps", TypeDouble, "estimated probability of treatment given the covariates"},
		{"logit_ps", TypeDouble, "log(ps / (1 - ps)), the scale calipers are measured on"},
		{"in_support", TypeBool, "false when the common-support rule excluded the unit"},
	}

	c.Matches.Comment = "Matched sets: one row per unit appearance in a set; a reused control appears once per set."
	c.Matches.Columns = []Column{runID,
		{"set_id", TypeBigInt, "matched set (pair, 1:k set, full-matching set or stratum)"},
		unit, treated,
		{"set_weight", TypeDouble, "weight of this appearance; a unit's matching weight is the sum over its rows"},
		{"match_distance", TypeDouble, "distance to the set's treated unit on the matching scale; 0 for the treated unit"},
	}

	c.Weights.Comment = "Per-unit weights, one column per weighting scheme; 0 for a unit outside support."
	c.Weights.Columns = []Column{runID, unit, treated}
	for _, s := range out.Schemes {
		c.Weights.Columns = append(c.Weights.Columns, Column{s, TypeDouble, "weight under the " + s + " scheme"})
	}

	for _, t := range c.Tables() {
		seen := map[string]string{}
		for _, col := range t.Columns {
			if err := ValidIdent(col.Name); err != nil {
				return nil, fmt.Errorf("column of table %s (%s): %w", t.Name, col.Comment, err)
			}
			if prev, dup := seen[col.Name]; dup {
				return nil, fmt.Errorf("%w: table %s would have two columns named %s (%s; %s); rename one in cohort.sql or the study",
					ErrBadInput, t.Name, col.Name, prev, col.Comment)
			}
			seen[col.Name] = col.Comment
		}
	}
	return c, nil
}
