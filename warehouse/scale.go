package warehouse

import (
	"context"
	"fmt"
	"math"
	"math/big"
	"slices"
	"strconv"
	"strings"

	"counterpart/match/score"
	"counterpart/match/weights"
)

// InWarehouse is the optional engine interface of warehouse-scale mode
// (study option score.fit_in: warehouse): the propensity model is fitted,
// and scores and closed-form weights are computed and written, inside the
// engine, so the covariate matrix never crosses the wire. A caller checks
// for it with a type assertion, wh.(warehouse.InWarehouse).
//
// What crosses the wire per step:
//
//   - Describe: one aggregate query (plus one LIMIT 0 query for the column
//     types, and one GROUP BY per categorical covariate for its levels):
//     counts, NULL counts, means and SDs — O(p) numbers.
//   - Moments: one aggregate query per pass returning the score
//     X̃'(z − e), the log-likelihood, the number of perfectly predicted
//     units and, on a full pass, the upper triangle of X̃'WX̃ — k + 3 or
//     k(k+1)/2 + k + 3 numbers, k = design columns + 1.
//   - Sampler.SampleDesign (optional): the design columns of a ~100k-unit
//     hash sample, once, to seed the iteration and approximate the
//     information, so that the fit takes gradient passes and one full
//     pass (score.FitMomentsChord) instead of a full pass per Newton step.
//   - ScoreInto: one INSERT … SELECT per table; nothing comes back.
//   - MatchInput: three columns per unit (id, stratum, logit), which is
//     what matching needs and all it needs.
//
// Distributed Postgres-protocol engines (Citus, Greenplum, Redshift and
// the like): every query above is a single SELECT with plain sum, count,
// min and max aggregates and no ORDER BY inside an aggregate, so the
// planner can push a partial aggregate to every node (each node sums its
// own rows' w·x_a·x_b) and let the coordinator add the partial sums — the
// same Partial Aggregate / Gather / Finalize Aggregate plan Postgres uses
// for its parallel workers on one machine (tested in
// warehouse/scaletest/plan_test.go). One pass is one such query,
// whatever the number of rows; ScoreInto's INSERT … SELECT runs where the
// rows are (co-located when the output tables are distributed on the unit
// column). Summation order then differs from run to run, which moves
// coefficients by a few ulps, far below the convergence tolerance.
//
// Safety: the cohort SQL is only ever used as a subquery, FROM (<sql>) AS
// c, after the engine's own check that it is a single SELECT; Describe,
// Moments, LogitRange and MatchInput run in a read-only transaction.
// Coefficients, centres, scales and category levels are bound parameters
// ($1, $2, ...), never formatted into the SQL text; column names pass
// ValidIdent-style checks of the cohort query and are quoted with Quote.
type InWarehouse interface {
	// Describe checks the cohort query's columns and summarises them:
	// counts, NULLs, non-finite values, mean and population SD of numeric
	// covariates, and the levels of categorical covariates sorted by the
	// same rule as ReadCohort (the first is the reference).
	Describe(ctx context.Context, q CohortQuery) (*Description, error)
	// Moments evaluates one pass's sums at beta, given on the
	// standardised scale of d (intercept first); with info false it
	// leaves out the k(k+1)/2 information sums (Moments.Info nil), which
	// are most of the query's work.
	Moments(ctx context.Context, q CohortQuery, d *DesignSQL, beta []float64, info bool) (*Moments, error)
	// LogitRange returns the smallest and largest linear predictor in each
	// arm at coef (original scale, intercept first), for the minmax
	// common-support rule.
	LogitRange(ctx context.Context, q CohortQuery, d *DesignSQL, coef []float64) (*LogitRange, error)
	// ScoreInto writes the run's rows of the scores table and, when
	// schemes is not empty, of the weights table with INSERT … SELECT.
	// It runs on the engine's one connection and neither begins nor
	// commits a transaction: call it inside the publish transaction so
	// that its rows become visible with the run's final status or not at
	// all. The tables must exist (StartRun creates them).
	ScoreInto(ctx context.Context, out Output, runID string, q CohortQuery, d *DesignSQL, coef []float64, support Support, schemes []string) error
	// MatchInput returns what matching needs, columnar: unit ids, the
	// treatment, a stratum number per distinct combination of exactOn
	// (0-based; all 0 without exactOn), the logit and the support flag.
	MatchInput(ctx context.Context, q CohortQuery, d *DesignSQL, coef []float64, support Support, exactOn []string) (*MatchInput, error)
	// UnitColumns returns the q.Outcomes columns (numeric or boolean) per
	// unit, in MatchInput's unit order, as doubles: booleans 0/1, NULL
	// NaN. The time-to-event and rate outcomes read their few columns
	// this way, as matching reads the logit: never the covariates.
	UnitColumns(ctx context.Context, q CohortQuery) ([][]float64, error)
}

// Description summarises a cohort query without reading its rows.
type Description struct {
	// N is the number of rows, Distinct the number of distinct unit ids.
	N, Distinct int
	NTreated    int
	// UnitNulls, TreatmentNulls count NULLs; TreatmentBad counts numeric
	// treatment values other than 0 and 1.
	UnitNulls, TreatmentNulls, TreatmentBad int
	IDKind                                  IDKind
	Unit, Treatment                         string
	// TreatmentBool is true for a boolean treatment column, false for a
	// numeric 0/1 one.
	TreatmentBool bool
	// Columns describes q.Covariates in order.
	Columns []ColumnDescription
}

// ColumnDescription summarises one covariate.
type ColumnDescription struct {
	Name string
	Kind CovKind
	// Nulls counts NULL values; NonFinite NaN and ±Inf (numeric only).
	Nulls, NonFinite int
	// Mean and SD (population, √(Σ(x − x̄)²/n)) of a numeric covariate.
	Mean, SD float64
	// Levels of a categorical covariate as text, sorted as ReadCohort
	// sorts them (numerically when every level is a finite number, else
	// bytewise); Counts[l] units have level l.
	Levels []string
	Counts []int
	// Text is true when the column already is text (no cast needed);
	// Bool when it is boolean (levels "false" and "true").
	Text, Bool bool
}

// DesignSQL is the propensity model's design as the engine computes it: a
// numeric covariate as is, a categorical one as 0/1 indicators of every
// level but the reference, in the order of score.Design, so the
// coefficients line up with the in-memory fit's.
type DesignSQL struct {
	Unit, Treatment string
	TreatmentBool   bool
	IDKind          IDKind
	Columns         []DesignColumn
}

// DesignColumn is one column of the design.
type DesignColumn struct {
	// Name is the coefficient name: the covariate, or covariate=level.
	Name string
	// Source is the cohort column.
	Source string
	// Categorical columns are CASE WHEN CAST(source AS VARCHAR) = Level
	// THEN 1 ELSE 0 END (Text skips the cast).
	Categorical bool
	Text        bool
	// Bool marks a boolean column: its levels are tested as the boolean
	// itself, not through a cast to text, which a foreign-data wrapper
	// cannot send to the node holding the rows.
	Bool  bool
	Level string
	// Center and Scale standardise the column, x̃ = (x − Center)·Scale,
	// with the mean and 1/SD (population) over the cohort, as
	// match/score.FitModel does internally.
	Center, Scale float64
}

// Names returns the design column names (without the intercept).
func (d *DesignSQL) Names() []string {
	out := make([]string, len(d.Columns))
	for i, c := range d.Columns {
		out[i] = c.Name
	}
	return out
}

// Centers and Scales return the standardisation of each column.
func (d *DesignSQL) Centers() []float64 {
	out := make([]float64, len(d.Columns))
	for i, c := range d.Columns {
		out[i] = c.Center
	}
	return out
}

// Scales returns 1/SD of each column.
func (d *DesignSQL) Scales() []float64 {
	out := make([]float64, len(d.Columns))
	for i, c := range d.Columns {
		out[i] = c.Scale
	}
	return out
}

// Moments are one Newton step's sums over the cohort at β̃ (standardised
// scale), with e_i = 1/(1 + exp(−η_i)) and w_i = e_i(1 − e_i):
//
//	Info[a*k+b] = Σ_i w_i x̃_ia x̃_ib   (a ≤ b; upper triangle, k×k)
//	Grad[a]     = Σ_i x̃_ia (z_i − e_i)
//	LogLik      = Σ_i z_i η_i − log(1 + exp η_i)
//	Perfect     = #{i: z_i = 1, η_i > 15} + #{i: z_i = 0, η_i < −15}
//
// Column 0 is the intercept. X̃'W z_work of the textbook IRLS form equals
// Info·β̃ + Grad; the score form is what match/score uses.
type Moments struct {
	N, NTreated int
	Info, Grad  []float64
	LogLik      float64
	Perfect     int
}

// LogitRange holds the extremes of the linear predictor per arm; index 0
// is the comparison arm, 1 the treated arm.
type LogitRange struct {
	Min, Max [2]float64
}

// Support is the common-support interval on the logit scale: a unit is in
// support when Low ≤ η ≤ High. Use ±Inf for no rule. Bounds on the logit
// rather than the score keep the boundary units of the minmax rule in:
// their η is exactly the bound.
type Support struct {
	Low, High float64
}

// MatchInput is what matching reads, one entry per unit.
type MatchInput struct {
	IDKind    IDKind
	IntIDs    []int64
	TextIDs   []string
	Treated   []bool
	Stratum   []int32
	Logit     []float64
	InSupport []bool
	// Strata is the number of distinct strata.
	Strata int
}

// NewDesignSQL checks a description the way ReadCohort and
// match/score.FitModel check a read cohort (NULLs, non-finite values,
// duplicate ids, treatment values, a constant covariate) and builds the
// design. Errors wrap ErrBadInput and name the column.
func NewDesignSQL(desc *Description) (*DesignSQL, error) {
	switch {
	case desc.UnitNulls > 0:
		return nil, fmt.Errorf("%w: unit column %s has %d NULL value(s); every unit needs an id", ErrBadInput, desc.Unit, desc.UnitNulls)
	case desc.Distinct != desc.N-desc.UnitNulls:
		return nil, fmt.Errorf("%w: unit column %s has %d duplicate id(s); the cohort query must return one row per unit", ErrBadInput, desc.Unit, desc.N-desc.Distinct)
	case desc.TreatmentNulls > 0:
		return nil, fmt.Errorf("%w: treatment column %s has %d NULL value(s)", ErrBadInput, desc.Treatment, desc.TreatmentNulls)
	case desc.TreatmentBad > 0:
		return nil, fmt.Errorf("%w: treatment column %s has %d value(s) other than 0 and 1", ErrBadInput, desc.Treatment, desc.TreatmentBad)
	case desc.NTreated == 0 || desc.NTreated == desc.N:
		return nil, fmt.Errorf("%w: treatment column %s is the same for all %d units; the cohort needs treated and comparison units", ErrBadInput, desc.Treatment, desc.N)
	}
	d := &DesignSQL{Unit: desc.Unit, Treatment: desc.Treatment, TreatmentBool: desc.TreatmentBool, IDKind: desc.IDKind}
	n := float64(desc.N)
	for _, c := range desc.Columns {
		if c.Nulls > 0 {
			return nil, fmt.Errorf("%w: covariate %s has %d NULL value(s); fill or exclude them in cohort.sql", ErrBadInput, c.Name, c.Nulls)
		}
		if c.Kind == Numeric {
			if c.NonFinite > 0 {
				return nil, fmt.Errorf("%w: covariate %s has %d non-finite value(s); fix or exclude them in cohort.sql", ErrBadInput, c.Name, c.NonFinite)
			}
			if !(c.SD > 0) || math.IsInf(1/c.SD, 0) {
				return nil, fmt.Errorf("%w: covariate %s is constant in the cohort (every value is %v); remove it", ErrBadInput, c.Name, c.Mean)
			}
		}
		// The expansion rule (dummy coding, reference level) is
		// score.Design's, shared with the in-memory design.
		terms, err := score.Design([]score.DesignCovariate{{Name: c.Name, Categorical: c.Kind == Categorical, Levels: c.Levels}})
		if err != nil {
			return nil, fmt.Errorf("%w: %w", ErrBadInput, err)
		}
		for _, t := range terms {
			if t.Level < 0 {
				d.Columns = append(d.Columns, DesignColumn{Name: t.Name, Source: c.Name, Center: c.Mean, Scale: 1 / c.SD})
				continue
			}
			p := float64(c.Counts[t.Level]) / n
			d.Columns = append(d.Columns, DesignColumn{
				Name: t.Name, Source: c.Name, Categorical: true, Text: c.Text, Bool: c.Bool,
				Level: c.Levels[t.Level], Center: p, Scale: 1 / math.Sqrt(p*(1-p)),
			})
		}
	}
	return d, nil
}

// SortLevels orders category levels as ReadCohort does: numerically when
// every level is a finite number (ties bytewise), else bytewise, which also
// puts false before true. counts is permuted alongside.
func SortLevels(levels []string, counts []int) {
	nums := make([]float64, len(levels))
	numeric := true
	for i, l := range levels {
		f, err := strconv.ParseFloat(l, 64)
		if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
			numeric = false
			break
		}
		nums[i] = f
	}
	idx := make([]int, len(levels))
	for i := range idx {
		idx[i] = i
	}
	slices.SortFunc(idx, func(a, b int) int {
		if numeric && nums[a] != nums[b] {
			if nums[a] < nums[b] {
				return -1
			}
			return 1
		}
		return strings.Compare(levels[a], levels[b])
	})
	l2 := make([]string, len(levels))
	c2 := make([]int, len(levels))
	for i, j := range idx {
		l2[i], c2[i] = levels[j], counts[j]
	}
	copy(levels, l2)
	copy(counts, c2)
}

// ScaleSQL builds the text of warehouse-scale queries. Both engines speak
// the same SQL here (CAST … AS DOUBLE PRECISION, ARRAY[…], greatest, ln,
// exp, $n parameters), so one builder serves both; args collects the bound
// values in $n order.
type ScaleSQL struct {
	args []any
}

// Args returns the values bound so far, in $1, $2, ... order.
func (b *ScaleSQL) Args() []any { return b.args }

// Num binds a number and returns its placeholder, cast so that the
// parameter's type is known whatever the context.
func (b *ScaleSQL) Num(v float64) string {
	b.args = append(b.args, v)
	return fmt.Sprintf("CAST($%d AS DOUBLE PRECISION)", len(b.args))
}

// Str binds a string and returns its placeholder.
func (b *ScaleSQL) Str(v string) string {
	b.args = append(b.args, v)
	return fmt.Sprintf("CAST($%d AS VARCHAR)", len(b.args))
}

// From returns the cohort query as a derived table named c; a trailing
// semicolon is dropped (it would end the statement inside the brackets).
func From(cohortSQL string) string {
	s := strings.TrimRight(cohortSQL, " \t\r\n;")
	return "(\n" + s + "\n) AS c"
}

// TreatmentExpr is the 0/1 integer treatment of row c.
func (d *DesignSQL) TreatmentExpr() string {
	t := "c." + Quote(d.Treatment)
	if d.TreatmentBool {
		return "CASE WHEN " + t + " THEN 1 ELSE 0 END"
	}
	return "CASE WHEN " + t + " = 1 THEN 1 ELSE 0 END"
}

// rawExpr is column j on its original scale.
func (b *ScaleSQL) rawExpr(c DesignColumn) string {
	src := "c." + Quote(c.Source)
	if !c.Categorical {
		return "CAST(" + src + " AS DOUBLE PRECISION)"
	}
	if c.Bool && (c.Level == "true" || c.Level == "false") {
		if c.Level == "false" {
			src = "NOT " + src
		}
		return "CASE WHEN " + src + " THEN 1.0 ELSE 0.0 END"
	}
	if !c.Text {
		src = "CAST(" + src + " AS VARCHAR)"
	}
	return "CASE WHEN " + src + " = " + b.Str(c.Level) + " THEN 1.0 ELSE 0.0 END"
}

// Eta returns the linear predictor over columns named x1..xp (standardised
// design) with coefficients beta bound as parameters.
func (b *ScaleSQL) Eta(beta []float64) string {
	parts := []string{b.Num(beta[0])}
	for j := 1; j < len(beta); j++ {
		parts = append(parts, fmt.Sprintf("%s * x%d", b.Num(beta[j]), j))
	}
	return strings.Join(parts, " + ")
}

// RawEta returns the linear predictor on the original scale,
// coef₀ + Σ coef_j x_j, over the cohort row c.
func (b *ScaleSQL) RawEta(d *DesignSQL, coef []float64) string {
	if len(coef) != len(d.Columns)+1 {
		panic(fmt.Sprintf("warehouse: %d coefficients for %d design columns", len(coef), len(d.Columns)))
	}
	parts := []string{b.Num(coef[0])}
	for j, c := range d.Columns {
		parts = append(parts, fmt.Sprintf("%s * %s", b.Num(coef[j+1]), b.rawExpr(c)))
	}
	return strings.Join(parts, " + ")
}

// MomentsSQL is the one aggregate query of a pass of the fit (see Moments;
// info false leaves out the information sums: a gradient pass).
// Each per-row quantity is computed once, at its own level: nested derived
// tables for DuckDB (lateral false; DuckDB computes each projection once),
// and for Postgres (lateral true) a chain of CROSS JOIN LATERAL
// unnest(ARRAY[…]) function scans. Postgres would pull plain derived
// tables up into the aggregate and copy each column's defining expression
// into every reference (η into each of the k(k+1)/2 sums, compounding per
// level); a function scan's outputs stay plain columns, and unlike an
// OFFSET 0 fence it keeps the whole query under one Partial Aggregate, so
// the parallel plan survives.
// Its single row and column is the text of an array of exact integer
// sums (exactsum.go; SplitMoments decodes it): count, treated count,
// log-likelihood, perfect count, the k gradient sums, then the upper
// triangle of the information row by row. With q.Partition the sums are
// made per partition first (sumSet.arraySQL).
//
// Per row, with t = exp(−|η|) (0 when |η| > 300, where w < 1e-130 and
// Postgres would raise an underflow error in the products):
//
//	e = 1/(1+t) for η ≥ 0, t/(1+t) otherwise; 1 − e the other one
//	log(1 + e^η) = max(η, 0) + ln(1 + t)
//	√w = √t/(1+t), u_a = √w·x̃_a, Info_ab = Σ u_a u_b
//
// the same cancellation-free forms as match/score's in-memory pass.
func MomentsSQL(q CohortQuery, d *DesignSQL, beta []float64, lateral, info bool) (string, []any) {
	k := len(d.Columns) + 1
	if len(beta) != k {
		panic(fmt.Sprintf("warehouse: %d coefficients for %d design columns", len(beta), k-1))
	}
	if q.Partition != "" {
		// A lateral function scan joins the partitioned table to a local
		// relation, which a foreign-data wrapper cannot send to a node;
		// nested derived tables are flattened onto the table itself.
		lateral = false
	}
	b := &ScaleSQL{}
	std := []col{{"z", d.TreatmentExpr()}}
	for j, c := range d.Columns {
		std = append(std, col{fmt.Sprintf("x%d", j+1), fmt.Sprintf("(%s - %s) * %s", b.rawExpr(c), b.Num(c.Center), b.Num(c.Scale))})
	}
	eta := b.Eta(beta)
	levels := [][]col{
		std,
		{{"eta", eta}},
		{{"t", "CASE WHEN abs(eta) > 300 THEN 0 ELSE exp(-abs(eta)) END"}},
		{
			{"p", "CASE WHEN eta >= 0 THEN 1 / (1 + t) ELSE t / (1 + t) END"},
			{"q", "CASE WHEN eta >= 0 THEN t / (1 + t) ELSE 1 / (1 + t) END"},
			{"l1p", "CASE WHEN eta > 0 THEN eta ELSE 0 END + ln(1 + t)"},
			{"sw", "sqrt(t) / (1 + t)"},
		},
	}
	last := []col{
		{"r", "CASE WHEN z = 1 THEN q ELSE -p END"},
		{"ll", "CASE WHEN z = 1 THEN eta - l1p ELSE -l1p END"},
		{"perfect", "CASE WHEN (z = 1 AND eta > 15) OR (z = 0 AND eta < -15) THEN 1 ELSE 0 END"},
	}
	if info {
		last = append(last, col{"u0", "sw"})
		for j := 1; j < k; j++ {
			last = append(last, col{fmt.Sprintf("u%d", j), fmt.Sprintf("sw * x%d", j)})
		}
	} else {
		levels[3] = levels[3][:3] // √w only feeds the information sums
	}
	levels = append(levels, last)
	if q.Partition != "" {
		levels = compactLevels(std, eta)
	}

	ss := momentSums(k, info, q.Partition != "", lateral)
	from := chainLevels(From(q.SQL), "", levels, lateral, q.Partition)
	return ss.arraySQL(from, partitionRef(q.Partition), ""), b.args
}

// compactLevels are MomentsSQL's levels for a partitioned pass. Flattened
// onto the table (see MomentsSQL), every reference to a per-row value
// repeats its definition, so the levels above would copy η (k terms)
// many times into every sum. Here each per-row quantity refers to η once:
//
//	r = z − e = z − ½ − ½·tanh(η/2)
//	w = e(1 − e) = 1/(2 + 2·cosh η)          (cosh overflows to +Inf: w = 0)
//	ll = z·η − log(1 + e^η) = z·η − η/2 − ln(2·cosh(η/2))
//
// and the information sums are Σ w·x̃_a·x̃_b. The values agree with the
// cancellation-free forms to rounding; the sums stay exact.
func compactLevels(std []col, eta string) [][]col {
	return [][]col{
		std,
		{{"eta", eta}},
		{
			{"r", "z - 0.5 - 0.5 * tanh(eta / 2)"},
			{"w", "1 / (2 + 2 * cosh(eta))"},
			{"ll", "z * eta - eta / 2 - ln(2 * cosh(eta / 2))"},
			{"perfect", "CASE WHEN (z = 1 AND eta > 15) OR (z = 0 AND eta < -15) THEN 1 ELSE 0 END"},
		},
	}
}

// momentSums lists MomentsSQL's sums in the order SplitMoments reads
// them: count, treated, log-likelihood, perfect predictions, the k
// gradient sums, then (info) the upper triangle of the information.
//
// compact names compactLevels' columns; postgres chooses one integer
// part per sum, where two would pass Postgres's limit of 1,664 result
// columns at about 40 design columns.
func momentSums(k int, info, compact, postgres bool) *sumSet {
	// Partitioned: NUMERIC (one reference per value, see sumSet.decimal).
	// Otherwise integer parts: two for the log-likelihood and gradient,
	// whose precision decides the solution (its sums cancel towards 0);
	// for the k(k+1)/2 information sums, which only steer Newton's steps
	// and give the SEs, one part on Postgres (designScaleOne, relative
	// error about 1e-12), keeping the pass under its column limit.
	ss := &sumSet{decimal: compact}
	infoScale := designScale
	if postgres {
		infoScale = designScaleOne
	}
	ss.count("")
	ss.integer("z")
	ss.sum("ll", designScale)
	ss.integer("perfect")
	ss.sum("r", designScale)
	for j := 1; j < k; j++ {
		ss.sum(fmt.Sprintf("r * x%d", j), designScale)
	}
	if info {
		for a := range k {
			for c := a; c < k; c++ {
				switch {
				case !compact:
					ss.sum(fmt.Sprintf("u%d * u%d", a, c), infoScale)
				case a == 0 && c == 0:
					ss.sum("w", infoScale)
				case a == 0:
					ss.sum(fmt.Sprintf("w * x%d", c), infoScale)
				default:
					ss.sum(fmt.Sprintf("w * x%d * x%d", a, c), infoScale)
				}
			}
		}
	}
	return ss
}

// fenceText is what closes a derived table that the planner must not
// merge into its parent. Postgres pulls simple subqueries up into the
// outer query, substituting each column by its defining expression; here
// that would copy η (p terms) into every one of the k(k+1)/2 sums, and
// each level of nesting multiplies the copies. OFFSET 0 stops the pull-up
// (a documented planner fence) and, being a constant zero, keeps the
// subquery parallel-safe. DuckDB computes each projection once and needs
// no fence.
func fenceText(fence bool) string {
	if fence {
		return "OFFSET 0\n"
	}
	return ""
}

// SplitMoments decodes MomentsSQL's one column into m (k = design
// columns + 1); info says whether the query had the information sums
// (m.Info stays nil otherwise); lateral and partitioned as MomentsSQL
// had them.
func SplitMoments(m *Moments, k int, text string, info, lateral, partitioned bool) error {
	vals, err := momentSums(k, info, partitioned, lateral).decode(text)
	if err != nil {
		return fmt.Errorf("moments: %w", err)
	}
	m.N, m.NTreated, m.LogLik, m.Perfect = int(vals[0]), int(vals[1]), vals[2], int(vals[3])
	arr := vals[4:]
	m.Grad = append([]float64(nil), arr[:k]...)
	if !info {
		return nil
	}
	m.Info = make([]float64, k*k)
	i := k
	for a := range k {
		for c := a; c < k; c++ {
			m.Info[a*k+c] = arr[i]
			i++
		}
	}
	return nil
}

// Logistic returns the SQL of e = 1/(1 + exp(−η)) over the expression eta,
// in the overflow-free form of match/score (exp of a non-positive number
// only; η is clamped to ±700 first so that Postgres's exp cannot
// underflow into an error — e is then within 1e-304 of 0 or 1).
func Logistic(eta string) string {
	// CASE rather than greatest/least: a foreign-data wrapper sends a
	// CASE to the node holding the rows, not greatest or least.
	h := "CASE WHEN " + eta + " > 700 THEN 700 WHEN " + eta + " < -700 THEN -700 ELSE " + eta + " END"
	return "CASE WHEN " + eta + " >= 0 THEN 1 / (1 + exp(-" + h + ")) ELSE exp(" + h + ") / (1 + exp(" + h + ")) END"
}

// WeightSQL returns the closed-form weight of scheme over columns e (the
// score) and z (0/1): the SQL formula of the scheme's entry in
// weights.Schemes, the registry that also holds its Go formula,
// multiplied by 0 outside common support (column ins).
func WeightSQL(scheme string) (string, error) {
	def, err := weights.Lookup(scheme)
	if err != nil {
		return "", fmt.Errorf("%w: unknown weighting scheme %q", ErrBadInput, scheme)
	}
	return "CASE WHEN ins THEN CAST(" + def.SQL() + " AS DOUBLE PRECISION) ELSE 0.0 END", nil
}

// ScoredSQL returns SELECT unit, z, eta, e, ins over the cohort at coef
// (original scale), the inner query of ScoreInto and MatchInput. extra
// columns of c are carried along under their own names.
func ScoredSQL(b *ScaleSQL, cohortSQL string, d *DesignSQL, coef []float64, sup Support, fence bool, extra ...string) string {
	eta := b.RawEta(d, coef)
	cols := []string{"c." + Quote(d.Unit) + " AS unit", d.TreatmentExpr() + " AS z", eta + " AS eta"}
	for _, e := range extra {
		cols = append(cols, "c."+Quote(e))
	}
	inner := "SELECT " + strings.Join(cols, ", ") + " FROM " + From(cohortSQL)
	return "SELECT s.*, " + Logistic("eta") + " AS e, " + b.InSupport("eta", sup) + " AS ins FROM (" + inner + " " + fenceText(fence) + ") AS s"
}

// InSupport returns the support flag of the linear predictor eta,
// (eta >= Low AND eta <= High) with the finite bounds bound as
// parameters.
func (b *ScaleSQL) InSupport(eta string, sup Support) string {
	lo, hi := "TRUE", "TRUE"
	if !math.IsInf(sup.Low, -1) {
		lo = eta + " >= " + b.Num(sup.Low)
	}
	if !math.IsInf(sup.High, 1) {
		hi = eta + " <= " + b.Num(sup.High)
	}
	return "(" + lo + " AND " + hi + ")"
}

// ScoreInsertSQL returns the INSERT … SELECT statements of ScoreInto for
// the contract's scores and (when schemes is not empty) weights tables.
// $1 is the run id in both.
func ScoreInsertSQL(c *Contract, runID, cohortSQL string, d *DesignSQL, coef []float64, sup Support, schemes []string, fence bool) ([]Statement, error) {
	unit := Quote(c.Unit)
	b := &ScaleSQL{args: []any{runID}}
	scored := ScoredSQL(b, cohortSQL, d, coef, sup, fence)
	stmts := []Statement{{fmt.Sprintf("INSERT INTO %s (run_id, %s, treated, ps, logit_ps, in_support)\nSELECT CAST($1 AS VARCHAR), unit, z = 1, e, eta, ins FROM (%s %s) AS f",
		QuoteQualified(c.Schema, c.Scores.Name), unit, scored, fenceText(fence)), b.args}}
	if len(schemes) == 0 {
		return stmts, nil
	}
	b = &ScaleSQL{args: []any{runID}}
	scored = ScoredSQL(b, cohortSQL, d, coef, sup, fence)
	names := []string{"run_id", unit, "treated"}
	exprs := []string{"CAST($1 AS VARCHAR)", "unit", "z = 1"}
	for _, s := range schemes {
		if err := ValidIdent(s); err != nil {
			return nil, fmt.Errorf("weighting scheme: %w", err)
		}
		w, err := WeightSQL(s)
		if err != nil {
			return nil, err
		}
		names = append(names, Quote(s))
		exprs = append(exprs, w)
	}
	stmts = append(stmts, Statement{fmt.Sprintf("INSERT INTO %s (%s)\nSELECT %s FROM (%s %s) AS f",
		QuoteQualified(c.Schema, c.Weights.Name), strings.Join(names, ", "), strings.Join(exprs, ", "), scored, fenceText(fence)), b.args})
	return stmts, nil
}

// LogitRangeSQL returns min and max of η per arm: one row with
// min0, max0, min1, max1. With q.Partition, per partition first (min and
// max of the partitions' extremes are the extremes).
func LogitRangeSQL(q CohortQuery, d *DesignSQL, coef []float64) (string, []any) {
	b := &ScaleSQL{}
	part := ""
	if q.Partition != "" {
		part = ", c." + Quote(q.Partition) + " AS " + partitionKey
	}
	inner := "SELECT " + d.TreatmentExpr() + " AS z, " + b.RawEta(d, coef) + " AS eta" + part + " FROM " + From(q.SQL)
	aggs := `min(CASE WHEN z = 0 THEN eta END) AS lo0, max(CASE WHEN z = 0 THEN eta END) AS hi0,
  min(CASE WHEN z = 1 THEN eta END) AS lo1, max(CASE WHEN z = 1 THEN eta END) AS hi1 FROM (` + inner + `) AS s`
	if q.Partition == "" {
		return "SELECT " + aggs, b.args
	}
	return "SELECT min(lo0), max(hi0), min(lo1), max(hi1) FROM (SELECT " + aggs + " GROUP BY " + partitionKey + ") AS per", b.args
}

// MatchInputSQL returns unit, z, stratum, eta, ins per unit; the stratum
// is dense_rank over the exactOn columns minus 1 (0 without them).
func MatchInputSQL(cohortSQL string, d *DesignSQL, coef []float64, sup Support, exactOn []string, fence bool) (string, []any, error) {
	for _, e := range exactOn {
		if err := ValidIdent(e); err != nil {
			return "", nil, fmt.Errorf("matching.exact_on: %w", err)
		}
	}
	b := &ScaleSQL{}
	scored := ScoredSQL(b, cohortSQL, d, coef, sup, fence, exactOn...)
	stratum := "0"
	if len(exactOn) > 0 {
		q := make([]string, len(exactOn))
		for i, e := range exactOn {
			q[i] = Quote(e)
		}
		stratum = "CAST(dense_rank() OVER (ORDER BY " + strings.Join(q, ", ") + ") - 1 AS INTEGER)"
	}
	return "SELECT unit, z = 1, " + stratum + ", eta, ins FROM (" + scored + " " + fenceText(fence) + ") AS f ORDER BY unit", b.args, nil
}

// UnitColumnsSQL returns the q.Outcomes columns per unit as DOUBLE
// PRECISION (booleans 0/1, NULL as NaN) in unit order, the order of
// MatchInputSQL; isBool flags the boolean columns.
func UnitColumnsSQL(q CohortQuery, isBool []bool) (string, error) {
	var exprs []string
	for i, name := range q.Outcomes {
		if err := ValidIdent(name); err != nil {
			return "", fmt.Errorf("cohort column: %w", err)
		}
		y := "c." + Quote(name)
		e := "CAST(" + y + " AS DOUBLE PRECISION)"
		if isBool[i] {
			e = "CASE WHEN " + y + " THEN 1.0 WHEN NOT " + y + " THEN 0.0 END"
		}
		exprs = append(exprs, "COALESCE("+e+", CAST('NaN' AS DOUBLE PRECISION))")
	}
	return "SELECT " + strings.Join(exprs, ", ") + " FROM " + From(q.SQL) + " ORDER BY c." + Quote(q.Unit), nil
}

// ColumnTypes is what an engine learned of the cohort query's result
// columns from its metadata, for DescribeSQL.
type ColumnTypes struct {
	UnitText      bool
	TreatmentBool bool
	// Categorical, Text and Bool, per covariate in q.Covariates order.
	Categorical, Text, Bool []bool
	// OutcomeBool, per outcome: a boolean column (SnapshotSQL).
	OutcomeBool []bool
}

// DescribeSQL returns the one aggregate query of Describe, two columns:
// a DOUBLE PRECISION array holding N, distinct ids, unit NULLs, treated,
// treatment NULLs, treatment values not 0/1, then per covariate NULLs,
// non-finite values and two unused slots; and the text of describeSums'
// exact sums, from which NewDescription computes each numeric
// covariate's mean and population SD exactly (a float avg or stddev
// would depend on the order the engine adds rows in). Each per-row
// value is a column of its own level (chainLevels; lateral for
// Postgres), so the split of x into parts refers to plain columns.
func DescribeSQL(q CohortQuery, t ColumnTypes, lateral bool) string {
	l0 := []col{{"u", "c." + Quote(q.Unit)}, {"tr", "c." + Quote(q.Treatment)}}
	var l1, l2, l3 []col
	for i, name := range q.Covariates {
		l0 = append(l0, col{fmt.Sprintf("v%d", i+1), "c." + Quote(name)})
		if t.Categorical[i] {
			continue
		}
		x := numericExpr(name)
		l0 = append(l0, col{fmt.Sprintf("nf%d", i+1), "CASE WHEN " + nonFinite(x) + " THEN 1 ELSE 0 END"},
			col{fmt.Sprintf("fx%d", i+1), "CASE WHEN " + nonFinite(x) + " THEN NULL ELSE " + x + " END"})
		l1 = append(l1, col{fmt.Sprintf("sp%d", i+1), fmt.Sprintf("fx%d * 134217729", i+1)})
		l2 = append(l2, col{fmt.Sprintf("hi%d", i+1), fmt.Sprintf("sp%d - (sp%d - fx%d)", i+1, i+1, i+1)})
		l3 = append(l3, col{fmt.Sprintf("lo%d", i+1), fmt.Sprintf("fx%d - hi%d", i+1, i+1)})
	}
	parts := []string{"count(*)", "count(DISTINCT u)", "count(*) - count(u)"}
	if t.TreatmentBool {
		parts = append(parts, "sum(CASE WHEN tr THEN 1 ELSE 0 END)", "count(*) - count(tr)", "0")
	} else {
		parts = append(parts, "sum(CASE WHEN tr = 1 THEN 1 ELSE 0 END)", "count(*) - count(tr)",
			"sum(CASE WHEN tr <> 0 AND tr <> 1 THEN 1 ELSE 0 END)")
	}
	for i := range q.Covariates {
		parts = append(parts, fmt.Sprintf("count(*) - count(v%d)", i+1))
		if t.Categorical[i] {
			parts = append(parts, "0", "0", "0")
			continue
		}
		parts = append(parts, fmt.Sprintf("sum(nf%d)", i+1), "0", "0")
	}
	for i := range parts {
		parts[i] = "coalesce(CAST(" + parts[i] + " AS DOUBLE PRECISION), 0)"
	}
	levels := [][]col{l0}
	for _, lv := range [][]col{l1, l2, l3} {
		if len(lv) > 0 {
			levels = append(levels, lv)
		}
	}
	return "SELECT CAST(ARRAY[" + strings.Join(parts, ",\n ") + "] AS DOUBLE PRECISION[]),\n  " +
		describeSums(q, t, DescribeDecimal(q, t)).arrayExpr() + "\nFROM " + chainLevels(From(q.SQL), "", levels, lateral, "")
}

// DescribeDecimal says whether the describe pass sums NUMERICs: only
// when its integer parts would pass MaxAggregates (about 120 numeric
// covariates).
func DescribeDecimal(q CohortQuery, t ColumnTypes) bool {
	return len(describeSums(q, t, false).aggs()) > MaxAggregates
}

// numericExpr is covariate name of row c as a double.
func numericExpr(name string) string {
	return "CAST(c." + Quote(name) + " AS DOUBLE PRECISION)"
}

// nonFinite is the SQL test for a NaN or infinite double x.
func nonFinite(x string) string {
	return x + " = CAST('NaN' AS DOUBLE PRECISION) OR abs(" + x + ") = CAST('Infinity' AS DOUBLE PRECISION)"
}

// describeSums lists, per numeric covariate over its finite values x
// (DescribeSQL's fx), the count, Σx, and Σx² as three exact sums Σh²,
// Σ2hl, Σl² of the Veltkamp split x = h + l (h the high 26 bits; Dekker
// 1971), whose products are exact in double precision — so the variance
// is that of the doubles themselves, with no rounding of x² per row.
//
// decimal (Postgres) sums NUMERICs instead, Σx² as the exact square of
// each value's NUMERIC, so three aggregates per covariate, the third
// holding Σx² and the fourth and fifth left out.
func describeSums(q CohortQuery, t ColumnTypes, decimal bool) *sumSet {
	ss := &sumSet{decimal: decimal}
	for i := range q.Covariates {
		if t.Categorical[i] {
			continue
		}
		fx, hi, lo := fmt.Sprintf("fx%d", i+1), fmt.Sprintf("hi%d", i+1), fmt.Sprintf("lo%d", i+1)
		ss.count(fx + " IS NOT NULL")
		if decimal {
			ss.sum(fx, rawScale)
			ss.parts = append(ss.parts, []sumPart{{"sum(CAST(" + fx + " AS NUMERIC) * CAST(" + fx + " AS NUMERIC))", 0}})
			continue
		}
		ss.sum(fx, rawScale)
		ss.sum(hi+" * "+hi, rawScale)
		ss.sum("2 * "+hi+" * "+lo, rawScale)
		ss.sum(lo+" * "+lo, rawScale)
	}
	return ss
}

// spread returns the mean and population SD from n, Σx and Σx², exact
// in big.Float before the one rounding of each.
func spread(n, s1, s2 *big.Float) (mean, sd float64) {
	if n.Sign() == 0 {
		return math.NaN(), math.NaN()
	}
	m := exactFloat().Quo(s1, n)
	v := exactFloat().Mul(s1, m) // (Σx)²/n
	v.Sub(s2, v)
	v.Quo(v, n)
	mean, _ = m.Float64()
	vf, _ := v.Float64()
	return mean, math.Sqrt(math.Max(vf, 0))
}

// LevelsSQL returns the distinct non-NULL values of a categorical
// covariate as text, with their counts.
func LevelsSQL(cohortSQL, column string, text bool) string {
	col := "c." + Quote(column)
	if !text {
		col = "CAST(" + col + " AS VARCHAR)"
	}
	return "SELECT " + col + ", count(*) FROM " + From(cohortSQL) + " WHERE c." + Quote(column) + " IS NOT NULL GROUP BY 1"
}

// NewDescription unpacks DescribeSQL's array; levels[i] and counts[i]
// hold covariate i's levels (unsorted) when it is categorical.
func NewDescription(q CohortQuery, t ColumnTypes, arr []float64, sums string, decimal bool, levels [][]string, counts [][]int) (*Description, error) {
	if len(arr) != 6+4*len(q.Covariates) {
		return nil, fmt.Errorf("describe: %d values returned, want %d", len(arr), 6+4*len(q.Covariates))
	}
	exact, err := describeSums(q, t, decimal).decodeExact(sums)
	if err != nil {
		return nil, fmt.Errorf("describe: %w", err)
	}
	d := &Description{
		N: int(arr[0]), Distinct: int(arr[1]), UnitNulls: int(arr[2]), NTreated: int(arr[3]),
		TreatmentNulls: int(arr[4]), TreatmentBad: int(arr[5]),
		Unit: q.Unit, Treatment: q.Treatment, TreatmentBool: t.TreatmentBool,
	}
	if t.UnitText {
		d.IDKind = IDText
	}
	for i, name := range q.Covariates {
		a := arr[6+4*i:]
		c := ColumnDescription{Name: name, Nulls: int(a[0])}
		if t.Categorical[i] {
			c.Kind = Categorical
			c.Text = t.Text[i]
			c.Bool = i < len(t.Bool) && t.Bool[i]
			c.Levels = append([]string(nil), levels[i]...)
			c.Counts = append([]int(nil), counts[i]...)
			SortLevels(c.Levels, c.Counts)
		} else {
			c.NonFinite = int(a[1])
			if decimal {
				c.Mean, c.SD = spread(exact[0], exact[1], exact[2])
				exact = exact[3:]
			} else {
				s2 := exactFloat().Add(exact[2], exact[3])
				s2.Add(s2, exact[4])
				c.Mean, c.SD = spread(exact[0], exact[1], s2)
				exact = exact[5:]
			}
		}
		d.Columns = append(d.Columns, c)
	}
	return d, nil
}

// CategoricalOf reports whether covariate name is listed in
// q.Categorical (matched case-insensitively, as ReadCohort does).
func CategoricalOf(q CohortQuery, name string) bool {
	for _, c := range q.Categorical {
		if strings.EqualFold(c, name) {
			return true
		}
	}
	return false
}
