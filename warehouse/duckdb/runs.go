package duckdb

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"strings"

	"counterpart/warehouse"
)

// analysisView drops and recreates the analysis view for o's covariates,
// outcomes and schemes (sql/common/analysis_view.sql).
func (w *Warehouse) analysisView(ctx context.Context, o *warehouse.Objects) error {
	if _, err := w.exec(ctx, render("analysis_view.sql", analysisData(o))); err != nil {
		return fmt.Errorf("create view %s: %w", o.C.Analysis, dbErr(err))
	}
	return nil
}

// analysisData feeds analysis_view.sql.
func analysisData(o *warehouse.Objects) any {
	type col struct{ Name, ColComment string }
	d := struct {
		View, Runs, Cohort, Scores, Matches, Weights, Unit, Comment string
		CohortCols, Schemes                                         []string
		Columns                                                     []col
	}{View: warehouse.QuoteQualified(o.C.Schema, o.C.Analysis), Runs: o.Runs, Cohort: o.Cohort,
		Scores: o.Scores, Matches: o.Matches, Weights: o.Weights, Unit: warehouse.Quote(o.C.Unit),
		Comment: "The latest succeeded run ready for weighted queries: one row per unit of its cohort snapshot with its propensity score, matching summary (matched_weight) and the weight of every scheme."}
	for _, c := range o.C.Cohort.Columns {
		d.CohortCols = append(d.CohortCols, warehouse.Quote(c.Name))
	}
	for _, c := range o.C.Weights.Columns[3:] {
		d.Schemes = append(d.Schemes, warehouse.Quote(c.Name))
	}
	for _, c := range o.C.AnalysisColumns {
		d.Columns = append(d.Columns, col{warehouse.Quote(c.Name), c.Comment})
	}
	return d
}

// insertEffects writes the run's effect rows; NaN becomes NULL.
func (w *Warehouse) insertEffects(ctx context.Context, o *warehouse.Objects, runID string, effects []warehouse.EffectRecord) error {
	if len(effects) == 0 {
		return nil
	}
	q := render("insert_effect.sql", map[string]string{"Effects": o.Effects})
	for _, e := range effects {
		_, err := w.exec(ctx, q, runID, e.Outcome, e.Adjustment, e.Estimand, e.Contrast, e.Method,
			nullFloat(e.Estimate), nullFloat(e.StdError), nullFloat(e.CILow), nullFloat(e.CIHigh), nullFloat(e.PValue),
			int64(e.NTreated), int64(e.NControl), int64(e.NMissing),
			nullFloat(e.EValue), nullFloat(e.EValueCI), nullFloat(e.RosenbaumGamma))
		if err != nil {
			return fmt.Errorf("insert into %s: %w", o.C.Effects.Name, dbErr(err))
		}
	}
	return nil
}

// nullFloat stores NaN (and ±Inf, which no column means) as NULL.
func nullFloat(f float64) any {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return nil
	}
	return f
}

// statusCheck brings the status check of a runs table created before the
// abandoned status existed up to date. DuckDB cannot alter or drop a
// constraint, so the table is rebuilt in the open transaction: created
// under a new name with the current definition, filled, the old one
// dropped and the new one renamed (views bind by name when queried).
func (w *Warehouse) statusCheck(ctx context.Context, o *warehouse.Objects) error {
	var expr sql.NullString
	err := w.conn.QueryRowContext(ctx, render("status_check.sql", nil), o.C.Schema, o.C.Runs.Name).Scan(&expr)
	if err == sql.ErrNoRows || (err == nil && strings.Contains(expr.String, warehouse.StatusAbandoned)) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("status check of %s: %w", o.C.Runs.Name, dbErr(err))
	}
	tmp := o.C.Runs
	tmp.Name = o.C.Runs.Name + "_migrating"
	if err := w.ensureTable(ctx, o.C.Schema, &tmp, true); err != nil {
		return err
	}
	cols := make([]string, len(o.C.Runs.Columns))
	for i, c := range o.C.Runs.Columns {
		cols[i] = warehouse.Quote(c.Name)
	}
	qtmp := warehouse.QuoteQualified(o.C.Schema, tmp.Name)
	list := strings.Join(cols, ", ")
	for _, stmt := range []string{
		"INSERT INTO " + qtmp + " (" + list + ") SELECT " + list + " FROM " + o.Runs,
		"DROP TABLE " + o.Runs,
		"ALTER TABLE " + qtmp + " RENAME TO " + warehouse.Quote(o.C.Runs.Name),
	} {
		if _, err := w.exec(ctx, stmt); err != nil {
			return fmt.Errorf("rebuild %s with the abandoned status: %w", o.C.Runs.Name, dbErr(err))
		}
	}
	return nil
}

// scanRuns reads select_runs.sql rows.
func scanRuns(rows *sql.Rows) ([]warehouse.RunRecord, error) {
	defer rows.Close()
	var out []warehouse.RunRecord
	for rows.Next() {
		var r warehouse.RunRecord
		var started, finished sql.NullTime
		if err := rows.Scan(&r.RunID, &r.Study, &r.Status, &started, &finished, &r.ToolVersion, &r.SpecSHA256,
			&r.SpecJSON, &r.CohortSQL, &r.CohortFingerprint, &r.CountsJSON, &r.ModelJSON, &r.BalanceJSON,
			&r.EffectsJSON, &r.Engine, &r.DBUser, &r.Message, &r.SummaryJSON); err != nil {
			return nil, err
		}
		r.StartedAt, r.FinishedAt = started.Time, finished.Time
		out = append(out, r)
	}
	return out, rows.Err()
}

// selectRuns runs select_runs.sql; a missing runs table gives no rows.
func (w *Warehouse) selectRuns(ctx context.Context, out warehouse.Output, where string, args ...any) ([]warehouse.RunRecord, *warehouse.Objects, error) {
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return nil, nil, err
	}
	cols, err := w.tableColumns(ctx, o.C.Schema, o.C.Runs.Name)
	if err != nil || len(cols) == 0 {
		return nil, o, err
	}
	_, hasSummary := cols["summary"]
	q := render("select_runs.sql", map[string]any{"Runs": o.Runs, "Where": where, "Limit": where == "" && len(args) > 0, "HasSummary": hasSummary})
	rows, err := w.conn.QueryContext(ctx, q, args...)
	if err != nil {
		return nil, o, fmt.Errorf("read %s: %w", o.C.Runs.Name, dbErr(err))
	}
	runs, err := scanRuns(rows)
	if err != nil {
		return nil, o, fmt.Errorf("read %s: %w", o.C.Runs.Name, dbErr(err))
	}
	return runs, o, nil
}

// Runs returns the study's runs newest first, at most limit (<= 0: all).
func (w *Warehouse) Runs(ctx context.Context, out warehouse.Output, limit int) ([]warehouse.RunRecord, error) {
	var args []any
	if limit > 0 {
		args = append(args, int64(limit))
	}
	runs, _, err := w.selectRuns(ctx, out, "", args...)
	if err != nil {
		return nil, fmt.Errorf("list runs: %w", err)
	}
	return runs, nil
}

// Run returns the runs row of runID; an unknown id wraps ErrBadInput.
func (w *Warehouse) Run(ctx context.Context, out warehouse.Output, runID string) (warehouse.RunRecord, error) {
	runs, o, err := w.selectRuns(ctx, out, "id", runID)
	if err != nil {
		return warehouse.RunRecord{}, fmt.Errorf("read run %s: %w", runID, err)
	}
	if len(runs) == 0 {
		return warehouse.RunRecord{}, fmt.Errorf("read run: %w: no run %q in %s.%s; list the runs to see their ids",
			warehouse.ErrBadInput, runID, out.Schema, o.C.Runs.Name)
	}
	return runs[0], nil
}

// LatestSucceeded returns the run the current views show.
func (w *Warehouse) LatestSucceeded(ctx context.Context, out warehouse.Output) (warehouse.RunRecord, bool, error) {
	runs, _, err := w.selectRuns(ctx, out, "succeeded")
	if err != nil {
		return warehouse.RunRecord{}, false, fmt.Errorf("latest succeeded run: %w", err)
	}
	if len(runs) == 0 {
		return warehouse.RunRecord{}, false, nil
	}
	return runs[0], true, nil
}

// PriorSets returns the matched sets of runID with native unit ids.
func (w *Warehouse) PriorSets(ctx context.Context, out warehouse.Output, runID string) (warehouse.PriorSets, error) {
	var ps warehouse.PriorSets
	if _, err := w.Run(ctx, out, runID); err != nil {
		return ps, fmt.Errorf("prior sets: %w", err)
	}
	o, _ := warehouse.NewObjects(out)
	q := render("prior_sets.sql", map[string]string{"Matches": o.Matches, "Unit": warehouse.Quote(out.Unit)})
	rows, err := w.conn.QueryContext(ctx, q, runID)
	if err != nil {
		return ps, fmt.Errorf("prior sets of run %s: %w", runID, dbErr(err))
	}
	defer rows.Close()
	for rows.Next() {
		var set int64
		var treated bool
		var dist, sw sql.NullFloat64
		var id int64
		var sid string
		unit := any(&id)
		if out.IDKind == warehouse.IDText {
			unit = &sid
		}
		if err := rows.Scan(&set, unit, &treated, &dist, &sw); err != nil {
			return ps, fmt.Errorf("prior sets of run %s: %w", runID, dbErr(err))
		}
		ps.SetID = append(ps.SetID, set)
		if out.IDKind == warehouse.IDText {
			ps.TextIDs = append(ps.TextIDs, sid)
		} else {
			ps.IntIDs = append(ps.IntIDs, id)
		}
		ps.Treated = append(ps.Treated, treated)
		ps.Distance = append(ps.Distance, nanNull(dist))
		ps.SetWeight = append(ps.SetWeight, nanNull(sw))
	}
	if err := rows.Err(); err != nil {
		return ps, fmt.Errorf("prior sets of run %s: %w", runID, dbErr(err))
	}
	return ps, nil
}

func nanNull(f sql.NullFloat64) float64 {
	if !f.Valid {
		return math.NaN()
	}
	return f.Float64
}

// DiffRuns compares the matched sets of runs a and b in SQL
// (sql/common/diff_runs.sql). Either run unknown wraps ErrBadInput.
func (w *Warehouse) DiffRuns(ctx context.Context, out warehouse.Output, a, b string) (warehouse.RunDiff, error) {
	d := warehouse.RunDiff{A: a, B: b}
	for _, id := range []string{a, b} {
		if _, err := w.Run(ctx, out, id); err != nil {
			return d, fmt.Errorf("diff runs: %w", err)
		}
	}
	o, _ := warehouse.NewObjects(out)
	q := render("diff_runs.sql", map[string]string{"Matches": o.Matches, "Unit": warehouse.Quote(out.Unit)})
	if err := w.conn.QueryRowContext(ctx, q, a, b).Scan(&d.Kept, &d.Changed, &d.New, &d.Dropped); err != nil {
		return d, fmt.Errorf("diff runs %s and %s: %w", a, b, dbErr(err))
	}
	return d, nil
}

// RowCounts counts the rows of every contract table; missing ones are 0.
func (w *Warehouse) RowCounts(ctx context.Context, out warehouse.Output) (map[string]int64, error) {
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return nil, fmt.Errorf("row counts: %w", err)
	}
	counts := map[string]int64{}
	for _, t := range o.C.Tables() {
		cols, err := w.tableColumns(ctx, o.C.Schema, t.Name)
		if err != nil {
			return nil, fmt.Errorf("row counts: %w", err)
		}
		var n int64
		if len(cols) > 0 {
			q := render("count_rows.sql", map[string]string{"Table": warehouse.QuoteQualified(o.C.Schema, t.Name)})
			if err := w.conn.QueryRowContext(ctx, q).Scan(&n); err != nil {
				return nil, fmt.Errorf("row counts: %s: %w", t.Name, dbErr(err))
			}
		}
		counts[t.Name] = n
	}
	return counts, nil
}
