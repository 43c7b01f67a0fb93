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
	// Binary is true when every non-NULL value is 0 or 1.
	Binary bool
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
	// KeepRuns, when > 0, is how many runs to keep (retention).
	KeepRuns int
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
