package postgres

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	sqltext "counterpart/sql"
	"counterpart/warehouse"
)

// analysisView drops and recreates the analysis view for o's covariates,
// outcomes and schemes (sql/common/analysis_view.sql).
func (w *Warehouse) analysisView(ctx context.Context, o *warehouse.Objects) error {
	if _, err := w.conn.Exec(ctx, render("analysis_view.sql", analysisData(o))); err != nil {
		return fmt.Errorf("create view %s: %w", o.C.Analysis, w.dbErr(err))
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

// insertEffects writes the run's effect rows in one batch; NaN becomes
// NULL.
func (w *Warehouse) insertEffects(ctx context.Context, o *warehouse.Objects, runID string, effects []warehouse.EffectRecord) error {
	if len(effects) == 0 {
		return nil
	}
	q := render("insert_effect.sql", map[string]string{"Effects": o.Effects})
	var b pgx.Batch
	for _, e := range effects {
		b.Queue(q, runID, e.Outcome, e.Adjustment, e.Estimand, e.Contrast, e.Method,
			nullFloat(e.Estimate), nullFloat(e.StdError), nullFloat(e.CILow), nullFloat(e.CIHigh), nullFloat(e.PValue),
			int64(e.NTreated), int64(e.NControl), int64(e.NMissing),
			nullFloat(e.EValue), nullFloat(e.EValueCI), nullFloat(e.RosenbaumGamma))
	}
	if err := w.conn.SendBatch(ctx, &b).Close(); err != nil {
		return fmt.Errorf("insert into %s: %w", o.C.Effects.Name, w.dbErr(err))
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
// abandoned status existed up to date: the constraint is dropped and
// added again under its name with the current list, in the open
// transaction.
func (w *Warehouse) statusCheck(ctx context.Context, o *warehouse.Objects) error {
	var name, def string
	err := w.conn.QueryRow(ctx, render("status_check.sql", nil), o.C.Schema, o.C.Runs.Name).Scan(&name, &def)
	if errors.Is(err, pgx.ErrNoRows) || (err == nil && strings.Contains(def, warehouse.StatusAbandoned)) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("status check of %s: %w", o.C.Runs.Name, w.dbErr(err))
	}
	lits := make([]string, len(warehouse.Statuses))
	for i, s := range warehouse.Statuses {
		lits[i] = sqltext.Literal(s)
	}
	q := fmt.Sprintf("ALTER TABLE %s DROP CONSTRAINT %s, ADD CONSTRAINT %s CHECK (status IN (%s))",
		o.Runs, warehouse.Quote(name), warehouse.Quote(name), strings.Join(lits, ", "))
	if _, err := w.conn.Exec(ctx, q); err != nil {
		return fmt.Errorf("update the status check of %s: %w", o.C.Runs.Name, w.dbErr(err))
	}
	return nil
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
	rows, err := w.conn.Query(ctx, q, args...)
	if err != nil {
		return nil, o, fmt.Errorf("read %s: %w", o.C.Runs.Name, w.dbErr(err))
	}
	var runs []warehouse.RunRecord
	var r warehouse.RunRecord
	var finished *time.Time
	_, err = pgx.ForEachRow(rows, []any{&r.RunID, &r.Study, &r.Status, &r.StartedAt, &finished, &r.ToolVersion, &r.SpecSHA256,
		&r.SpecJSON, &r.CohortSQL, &r.CohortFingerprint, &r.CountsJSON, &r.ModelJSON, &r.BalanceJSON,
		&r.EffectsJSON, &r.Engine, &r.DBUser, &r.Message, &r.SummaryJSON}, func() error {
		rec := r
		rec.FinishedAt = time.Time{}
		if finished != nil {
			rec.FinishedAt = *finished
		}
		runs = append(runs, rec)
		return nil
	})
	if err != nil {
		return nil, o, fmt.Errorf("read %s: %w", o.C.Runs.Name, w.dbErr(err))
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
	rows, err := w.conn.Query(ctx, q, runID)
	if err != nil {
		return ps, fmt.Errorf("prior sets of run %s: %w", runID, w.dbErr(err))
	}
	var set, id int64
	var sid string
	var treated bool
	var dist, sw *float64
	unit := any(&id)
	if out.IDKind == warehouse.IDText {
		unit = &sid
	}
	_, err = pgx.ForEachRow(rows, []any{&set, unit, &treated, &dist, &sw}, func() error {
		ps.SetID = append(ps.SetID, set)
		if out.IDKind == warehouse.IDText {
			ps.TextIDs = append(ps.TextIDs, sid)
		} else {
			ps.IntIDs = append(ps.IntIDs, id)
		}
		ps.Treated = append(ps.Treated, treated)
		ps.Distance = append(ps.Distance, nanNull(dist))
		ps.SetWeight = append(ps.SetWeight, nanNull(sw))
		return nil
	})
	if err != nil {
		return ps, fmt.Errorf("prior sets of run %s: %w", runID, w.dbErr(err))
	}
	return ps, nil
}

func nanNull(f *float64) float64 {
	if f == nil {
		return math.NaN()
	}
	return *f
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
	if err := w.conn.QueryRow(ctx, q, a, b).Scan(&d.Kept, &d.Changed, &d.New, &d.Dropped); err != nil {
		return d, fmt.Errorf("diff runs %s and %s: %w", a, b, w.dbErr(err))
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
			if err := w.conn.QueryRow(ctx, q).Scan(&n); err != nil {
				return nil, fmt.Errorf("row counts: %s: %w", t.Name, w.dbErr(err))
			}
		}
		counts[t.Name] = n
	}
	return counts, nil
}
