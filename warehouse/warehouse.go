// Package warehouse is the only part of counterpart that talks to a
// database. It defines the Warehouse interface every engine implements, the
// columnar Cohort an engine decodes the analyst's query into, and the
// Publication an engine writes back in one transaction.
//
// Adding an engine:
//
//  1. Create warehouse/<engine> with an Open(ctx, dsn) constructor returning
//     a Warehouse.
//  2. ReadCohort must run the analyst's SQL so that it cannot write (a
//     read-only transaction where the engine has one, otherwise a check of
//     the prepared statement's type) and decode rows straight into the
//     columnar Cohort following the rules on CohortQuery.
//  3. StartRun, Publish and FailRun write the tables of the contract in
//     README.md; Publish must be one transaction: either every row of the
//     run and its final status are visible, or none of them is.
//  4. Lock must make a second concurrent run of the same study fail with an
//     error wrapping ErrLocked.
//  5. Run the shared conformance tests against the new engine.
//
// Engines must not correct or guess at the user's input: when in doubt they
// return an error that says what is wrong, where, and how to fix it.
package warehouse

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"
)

// Warehouse is one open connection to an analyst's warehouse.
type Warehouse interface {
	// ReadCohort runs q.SQL without the ability to write and decodes it.
	ReadCohort(ctx context.Context, q CohortQuery) (*Cohort, error)
	// Lock takes the per-study lock for the life of the run. The returned
	// function releases it. A lock held elsewhere gives an error wrapping
	// ErrLocked.
	Lock(ctx context.Context, out Output) (unlock func() error, err error)
	// StartRun creates the contract's tables and views when absent and
	// commits a runs row with status "running".
	StartRun(ctx context.Context, out Output, run RunRecord) error
	// Publish writes every row of the run and its final runs row in one
	// transaction.
	Publish(ctx context.Context, out Output, p *Publication) error
	// FailRun marks a started run as failed with a message (best effort;
	// it runs after an error).
	FailRun(ctx context.Context, out Output, runID, message string) error
	// CancelRun marks a started run as cancelled (a signal stopped it),
	// best effort, like FailRun.
	CancelRun(ctx context.Context, out Output, runID, message string) error
	// Runs returns the runs rows newest first (by started_at, then
	// run_id), at most limit of them (limit <= 0: all). No runs table
	// yet gives none.
	Runs(ctx context.Context, out Output, limit int) ([]RunRecord, error)
	// Run returns one runs row; an unknown run id is an error wrapping
	// ErrBadInput that names it. ("latest" is the caller's to resolve.)
	Run(ctx context.Context, out Output, runID string) (RunRecord, error)
	// LatestSucceeded returns the run the current views show; false when
	// no run has succeeded.
	LatestSucceeded(ctx context.Context, out Output) (RunRecord, bool, error)
	// PriorSets returns the matched sets of a run with native unit ids,
	// for rematching that keeps earlier sets stable.
	PriorSets(ctx context.Context, out Output, runID string) (PriorSets, error)
	// DiffRuns compares the matched sets of runs a and b (see RunDiff).
	DiffRuns(ctx context.Context, out Output, a, b string) (RunDiff, error)
	// RowCounts counts the rows of every contract table, keyed by table
	// name (prefix included); a table not created yet counts 0.
	RowCounts(ctx context.Context, out Output) (map[string]int64, error)
	// Engine names the engine ("duckdb", "postgres").
	Engine() string
	// User names the database user, for lineage; never a credential.
	User(ctx context.Context) string
	Close() error
}

// Error classes the CLI maps to exit codes.
var (
	// ErrBadInput marks errors caused by the study or the data: exit 2.
	ErrBadInput = errors.New("bad input")
	// ErrLocked marks a lock held by another run of the same study: exit 4.
	ErrLocked = errors.New("another run holds the lock")
	// ErrBusy marks a warehouse another process holds (a DuckDB file open
	// elsewhere): its own exit code, so a scheduler does not take it for
	// "this study is already running".
	ErrBusy = errors.New("warehouse busy (another process holds the file)")
)

// CohortQuery says how to read the cohort.
//
// Decoding rules: the unit column keeps its type (any integer type becomes
// int64, text stays string) and must be unique and non-NULL. The treatment
// column is boolean or a number equal to 0 or 1. Numeric covariates become
// float64 unless listed in Categorical; text, boolean and enum covariates
// (and those listed) become categorical with levels sorted ascending (numbers
// numerically, booleans false<true, text bytewise); the first level is the
// reference. Outcomes are numeric or boolean and become float64 with NaN for
// NULL. A NULL in the unit, treatment or a covariate is an error naming the
// column and the count.
type CohortQuery struct {
	SQL         string
	Unit        string
	Treatment   string
	Outcomes    []string
	Covariates  []string
	Categorical []string
	// Partition, when set, is a column of the query's result on which
	// the cohort's table is partitioned across the nodes of a
	// distributed engine (cohort.partition_column). Warehouse-scale
	// passes then aggregate per value of it first and add the
	// per-partition sums, so that each node aggregates its own rows.
	Partition string
}

// IDKind is the type of the unit identifier column.
type IDKind int

const (
	// IDInt is any integer column, held as int64.
	IDInt IDKind = iota
	// IDText is any text column.
	IDText
)

// CovKind says whether a covariate is numeric or categorical.
type CovKind int

const (
	Numeric CovKind = iota
	Categorical
)

// Covariate is one column of the cohort, held columnar.
type Covariate struct {
	Name string
	Kind CovKind
	// Values holds a numeric covariate.
	Values []float64
	// Levels and Codes hold a categorical covariate: Codes[i] indexes
	// Levels, Levels[0] is the reference level.
	Levels []string
	Codes  []int32
}

// Outcome is one outcome column; NaN marks NULL.
type Outcome struct {
	Name   string
	Values []float64
	// Kind is what the outcome measures, as ClassifyOutcome read it.
	Kind OutcomeKind
}

// OutcomeKind is what an outcome measures. The reader classes every
// outcome; the kind decides its estimators, its effects rows and its
// report section (match/study's outcome kinds). Time-to-event and rate
// outcomes, which read more than one column, add kinds here.
type OutcomeKind int

const (
	// OutcomeContinuous is a number compared by its mean.
	OutcomeContinuous OutcomeKind = iota
	// OutcomeBinary is an event (1) or none (0), compared by its risk.
	OutcomeBinary
)

// String names the kind as the summary does.
func (k OutcomeKind) String() string {
	switch k {
	case OutcomeContinuous:
		return "continuous"
	case OutcomeBinary:
		return "binary"
	}
	return fmt.Sprintf("OutcomeKind(%d)", int(k))
}

// ClassifyOutcome classes a single-column outcome: binary when it has a
// non-missing value and every non-missing value is 0 or 1, continuous
// otherwise. NaN marks a missing value.
func ClassifyOutcome(vals []float64) OutcomeKind {
	seen := false
	for _, v := range vals {
		if math.IsNaN(v) {
			continue
		}
		if v != 0 && v != 1 {
			return OutcomeContinuous
		}
		seen = true
	}
	if seen {
		return OutcomeBinary
	}
	return OutcomeContinuous
}

// Cohort is the analyst's query result, one entry per unit in every slice.
type Cohort struct {
	Unit       string
	IDKind     IDKind
	IntIDs     []int64  // when IDKind == IDInt
	TextIDs    []string // when IDKind == IDText
	Treatment  string
	Treated    []bool
	Covariates []Covariate
	Outcomes   []Outcome
}

// N is the number of units.
func (c *Cohort) N() int { return len(c.Treated) }

// Output names where results go and what the per-study tables look like.
type Output struct {
	Schema string
	Prefix string
	Study  string
	// Unit is the unit column name and its kind, for native id columns.
	Unit   string
	IDKind IDKind
	// Covariates and Outcomes describe the cohort snapshot columns
	// (numeric: DOUBLE, categorical: text) and the balance view.
	Covariates []CovariateMeta
	Treatment  string
	Outcomes   []string
	// Schemes lists the weights table's scheme columns in order.
	Schemes []string
	// TimeToEvent says the study has time-to-event outcomes: the
	// survival table and its current view exist.
	TimeToEvent bool
	// KeepRuns, when > 0, is how many succeeded runs to keep (retention).
	KeepRuns int
	// KeepFailedDays, when > 0, is how many days the runs that did not
	// succeed are kept, counted from their start.
	KeepFailedDays int
}

// CovariateMeta describes a covariate without its values.
type CovariateMeta struct {
	Name string
	Kind CovKind
}

// Run statuses.
const (
	StatusRunning   = "running"
	StatusSucceeded = "succeeded"
	StatusRejected  = "rejected"
	StatusFailed    = "failed"
	StatusSkipped   = "skipped"
	// StatusAbandoned marks a run left "running" by a process that died:
	// the next StartRun of the study, which holds the lock, sets it.
	StatusAbandoned = "abandoned"
	// StatusCancelled marks a run a signal (SIGTERM, SIGINT) stopped; its
	// rows were rolled back.
	StatusCancelled = "cancelled"
)

// RunRecord is one row of {prefix}runs. JSON fields hold encoded JSON text.
type RunRecord struct {
	RunID             string
	Study             string
	Status            string
	StartedAt         time.Time
	FinishedAt        time.Time // zero while running
	ToolVersion       string
	SpecSHA256        string
	SpecJSON          string
	CohortSQL         string
	CohortFingerprint string
	CountsJSON        string
	ModelJSON         string
	BalanceJSON       string
	EffectsJSON       string
	Engine            string
	DBUser            string
	Message           string
	// SummaryJSON is the whole run summary, written by Publish.
	SummaryJSON string
}

// Publication is everything one run writes. Slices indexed by unit follow
// the Cohort's order.
type Publication struct {
	Run    RunRecord
	Cohort *Cohort
	// Scores, one per unit.
	PS        []float64
	LogitPS   []float64
	InSupport []bool
	// Matches: one row per (set, unit) appearance. Unit indexes the cohort.
	Matches MatchRows
	// Weights, one column per Output.Schemes entry, one value per unit.
	Weights [][]float64
	// Effects, one row per outcome × adjustment × contrast; written to
	// {prefix}effects.
	Effects []EffectRecord
	// Survival holds the Kaplan–Meier steps of the time-to-event
	// outcomes, written to {prefix}survival (Output.TimeToEvent).
	Survival []SurvivalStep
	// Seal, when set, is called by the publish transaction's last
	// statement before COMMIT, which stamps the run's finished_at: it
	// returns that time (the caller's clock, so that it agrees with the
	// caller's stage timings) and the summary JSON to store with it, the
	// final one, whose times end at that statement. Nil: the engine's
	// clock, and Run.SummaryJSON as written.
	Seal func() (finished time.Time, summaryJSON string)
}

// SurvivalStep is one row of the survival table: one arm's weighted
// Kaplan–Meier step at a follow-up time of one time-to-event outcome
// under one adjustment.
type SurvivalStep struct {
	Outcome, Adjustment string
	Treated             bool
	Time                float64
	// AtRisk, Events and Censored are weighted counts at Time.
	AtRisk, Events, Censored float64
	Survival, StdError       float64
}

// EffectRecord is one row of {prefix}effects: one effect estimate of one
// outcome under one adjustment and contrast. NaN floats are stored as
// NULL (an undefined standard error, a ratio with a zero denominator).
type EffectRecord struct {
	Outcome    string
	Adjustment string // unadjusted, matched or a weighting scheme
	Estimand   string // ATT, ATE, ATO, ...
	Contrast   string // difference, risk_ratio or odds_ratio
	Method     string // how the standard error was obtained
	Estimate   float64
	StdError   float64
	CILow      float64
	CIHigh     float64
	PValue     float64
	NTreated   int
	NControl   int
	NMissing   int // units without the outcome
	// EValue and EValueCI: the E-value of the estimate and of the
	// confidence limit closer to the null (VanderWeele & Ding 2017).
	EValue   float64
	EValueCI float64
	// RosenbaumGamma: the sensitivity parameter at which the one-sided
	// upper-bound p-value first exceeds 0.05 (matched pairs); NaN when not
	// computed.
	RosenbaumGamma float64
	// Horizon is the follow-up time of a time-to-event row; NaN otherwise.
	Horizon float64
}

// PriorSets are the matched sets of one run, one entry per (set, unit)
// row, sorted by set id, the treated unit(s) first, then unit id. The
// unit ids keep their native type: IntIDs when Output.IDKind is IDInt,
// otherwise TextIDs.
type PriorSets struct {
	SetID     []int64
	IntIDs    []int64
	TextIDs   []string
	Treated   []bool
	Distance  []float64 // NaN where NULL
	SetWeight []float64 // NaN where NULL
}

// Len is the number of rows.
func (p PriorSets) Len() int { return len(p.SetID) }

// RunDiff compares the matched sets of run A with those of run B, by
// treated unit. For a treated unit its controls are the controls of every
// set it belongs to in that run.
type RunDiff struct {
	A, B string
	// Kept: treated in a set in both runs with the identical controls.
	Kept int64
	// Changed: treated in a set in both runs, different controls.
	Changed int64
	// New: treated in a set in B only.
	New int64
	// Dropped: treated in a set in A only.
	Dropped int64
}

// MatchRows holds the matches table columnar.
type MatchRows struct {
	SetID     []int64
	Unit      []int
	Treated   []bool
	SetWeight []float64
	Distance  []float64
}

// Len is the number of match rows.
func (m MatchRows) Len() int { return len(m.SetID) }
