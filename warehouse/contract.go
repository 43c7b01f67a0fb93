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
	// Tables, in creation order: runs, cohort, scores, matches, weights,
	// effects.
	Runs, Cohort, Scores, Matches, Weights, Effects Table
	// Views over the latest succeeded run, and the balance views.
	CurrentCohort, CurrentScores, CurrentMatches, CurrentWeights string
	CurrentEffects                                               string
	// Survival and CurrentSurvival exist for studies with time-to-event
	// outcomes (Output.TimeToEvent); otherwise Survival.Name is "".
	Survival                Table
	CurrentSurvival         string
	Balance, BalanceHistory string
	// Analysis is the view of the latest succeeded run's units with their
	// scores, matching weight and scheme weights (AnalysisColumns).
	Analysis string
	// AnalysisColumns are the analysis view's columns, in order.
	AnalysisColumns []Column
	// Unit and Treatment are the source names of the unit and treatment
	// columns, used as column names in the cohort snapshot (and the unit's
	// in scores, matches and weights).
	Unit, Treatment string
}

// Tables lists the contract's tables in creation order.
func (c *Contract) Tables() []*Table {
	t := []*Table{&c.Runs, &c.Cohort, &c.Scores, &c.Matches, &c.Weights, &c.Effects}
	if c.Survival.Name != "" {
		t = append(t, &c.Survival)
	}
	return t
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
		{&c.Matches.Name, "matches"}, {&c.Weights.Name, "weights"}, {&c.Effects.Name, "effects"},
		{&c.CurrentCohort, "current_cohort"}, {&c.CurrentScores, "current_scores"},
		{&c.CurrentMatches, "current_matches"}, {&c.CurrentWeights, "current_weights"},
		{&c.CurrentEffects, "current_effects"},
		{&c.Balance, "balance"}, {&c.BalanceHistory, "balance_history"}, {&c.Analysis, "analysis"},
	}
	if out.TimeToEvent {
		names = append(names, struct {
			p    *string
			base string
		}{&c.Survival.Name, "survival"}, struct {
			p    *string
			base string
		}{&c.CurrentSurvival, "current_survival"})
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
		{"status", TypeText, "running, succeeded, rejected (balance gate failed; rows kept for inspection), failed, skipped, cancelled (stopped by a signal; nothing published), or abandoned (left running by a process that died; set by the next run)"},
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
		{"summary", TypeJSON, "the whole run summary as the run reported it; NULL until the run is published"},
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

	c.Effects.Comment = "Effect estimates of every run: one row per outcome, adjustment and contrast, with uncertainty and sensitivity."
	effDouble := func(name, comment string) Column { return Column{name, TypeDouble, comment + "; NULL when undefined"} }
	c.Effects.Columns = []Column{runID,
		{"outcome", TypeText, "outcome column as in the study"},
		{"adjustment", TypeText, "unadjusted, matched, or a weighting scheme"},
		{"estimand", TypeText, "population the effect refers to (ATT, ATE, ATO, ...)"},
		{"contrast", TypeText, "difference, risk_ratio or odds_ratio (treated versus control)"},
		{"method", TypeText, "how the standard error was obtained"},
		effDouble("estimate", "point estimate on the contrast's scale"),
		effDouble("std_error", "standard error (of the log for a ratio)"),
		effDouble("ci_low", "lower limit of the 95% confidence interval"),
		effDouble("ci_high", "upper limit of the 95% confidence interval"),
		effDouble("p_value", "two-sided p-value against no effect"),
		{"n_treated", TypeBigInt, "treated units with the outcome that entered the estimate"},
		{"n_control", TypeBigInt, "control units with the outcome that entered the estimate"},
		{"n_missing", TypeBigInt, "units left out because the outcome is missing"},
		effDouble("e_value", "E-value of the estimate: the risk-ratio association an unmeasured confounder would need with treatment and outcome to explain it away (VanderWeele & Ding 2017)"),
		effDouble("e_value_ci", "E-value of the confidence limit closer to no effect"),
		effDouble("rosenbaum_gamma", "Rosenbaum sensitivity: the gamma at which the one-sided upper-bound p-value first exceeds 0.05 (matched pairs)"),
		effDouble("horizon", "follow-up time a time-to-event row is read at (survival and risk contrasts, RMST)"),
	}
	if c.Survival.Name != "" {
		c.Survival.Comment = "Weighted Kaplan–Meier steps of every run: one row per time-to-event outcome, adjustment, arm and follow-up time."
		c.Survival.Columns = []Column{runID,
			{"outcome", TypeText, "time-to-event outcome as named in the study"},
			{"adjustment", TypeText, "unadjusted, matched, or a weighting scheme"},
			{"treated", TypeBool, "arm: true for the treated"},
			{"time", TypeDouble, "a follow-up time of the arm (an event or censoring time)"},
			{"at_risk", TypeDouble, "weighted number at risk just before the time"},
			{"events", TypeDouble, "weighted events at the time"},
			{"censored", TypeDouble, "weighted censorings at the time"},
			{"survival", TypeDouble, "Kaplan–Meier survival just after the time"},
			{"std_error", TypeDouble, "Greenwood-type standard error of the survival"},
		}
	}

	// The analysis view: the snapshot's columns (run_id, unit, treatment,
	// covariates, outcomes), the scores, the matching summary and every
	// scheme's weight.
	c.AnalysisColumns = append([]Column(nil), c.Cohort.Columns...)
	c.AnalysisColumns = append(c.AnalysisColumns, c.Scores.Columns[3:]...)
	c.AnalysisColumns = append(c.AnalysisColumns,
		Column{"set_id", TypeBigInt, "the unit's matched set; for a control reused in several sets the smallest set id; NULL when unmatched"},
		Column{"set_count", TypeBigInt, "number of matched sets the unit appears in; 0 when unmatched"},
		Column{"matched_weight", TypeDouble, "matching weight: sum of set_weight over the unit's sets; 0 when unmatched"})
	c.AnalysisColumns = append(c.AnalysisColumns, c.Weights.Columns[3:]...)
	analysis := &Table{Name: c.Analysis, Columns: c.AnalysisColumns}

	for _, t := range append(c.Tables(), analysis) {
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

// Statuses lists every status the runs table accepts.
var Statuses = []string{StatusRunning, StatusSucceeded, StatusRejected, StatusFailed, StatusSkipped, StatusAbandoned, StatusCancelled}

// Objects holds a contract and the quoted, schema-qualified names of its
// tables, as the engines' statements use them.
type Objects struct {
	C                                               *Contract
	Runs, Cohort, Scores, Matches, Weights, Effects string
	// Survival is "" without time-to-event outcomes.
	Survival string
}

// NewObjects builds the contract of out and quotes its table names.
func NewObjects(out Output) (*Objects, error) {
	c, err := NewContract(out)
	if err != nil {
		return nil, err
	}
	q := func(name string) string { return QuoteQualified(c.Schema, name) }
	o := &Objects{C: c, Runs: q(c.Runs.Name), Cohort: q(c.Cohort.Name), Scores: q(c.Scores.Name),
		Matches: q(c.Matches.Name), Weights: q(c.Weights.Name), Effects: q(c.Effects.Name)}
	if c.Survival.Name != "" {
		o.Survival = q(c.Survival.Name)
	}
	return o, nil
}

// RetentionTables lists the quoted tables retention deletes from, in
// order: the run's child tables first, the runs table last, so that no
// child row outlives its run.
func (o *Objects) RetentionTables() []string {
	if o.Survival != "" {
		return []string{o.Cohort, o.Scores, o.Matches, o.Weights, o.Effects, o.Survival, o.Runs}
	}
	return []string{o.Cohort, o.Scores, o.Matches, o.Weights, o.Effects, o.Runs}
}
