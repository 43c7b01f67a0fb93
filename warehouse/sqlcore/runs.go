package sqlcore

import (
	"context"
	"fmt"
	"math"
	"time"

	"counterpart/warehouse"
)

// selectRuns runs select_runs.sql; a missing runs table gives no rows.
func (c *Core) selectRuns(ctx context.Context, out warehouse.Output, where string, args ...any) ([]warehouse.RunRecord, *warehouse.Objects, error) {
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return nil, nil, err
	}
	cols, err := c.tableColumns(ctx, o.C.Schema, o.C.Runs.Name)
	if err != nil || len(cols) == 0 {
		return nil, o, err
	}
	_, hasSummary := cols["summary"]
	q := c.Render("select_runs.sql", map[string]any{"Runs": o.Runs, "Where": where, "Limit": where == "" && len(args) > 0, "HasSummary": hasSummary})
	var runs []warehouse.RunRecord
	var r warehouse.RunRecord
	var finished *time.Time
	err = c.Each(ctx, q, args, []any{&r.RunID, &r.Study, &r.Status, &r.StartedAt, &finished, &r.ToolVersion, &r.SpecSHA256,
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
		return nil, o, fmt.Errorf("read %s: %w", o.C.Runs.Name, err)
	}
	return runs, o, nil
}

// Runs returns the study's runs newest first, at most limit (<= 0: all).
func (c *Core) Runs(ctx context.Context, out warehouse.Output, limit int) ([]warehouse.RunRecord, error) {
	var args []any
	if limit > 0 {
		args = append(args, int64(limit))
	}
	runs, _, err := c.selectRuns(ctx, out, "", args...)
	if err != nil {
		return nil, fmt.Errorf("list runs: %w", err)
	}
	return runs, nil
}

// Run returns the runs row of runID; an unknown id wraps ErrBadInput.
func (c *Core) Run(ctx context.Context, out warehouse.Output, runID string) (warehouse.RunRecord, error) {
	runs, o, err := c.selectRuns(ctx, out, "id", runID)
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
func (c *Core) LatestSucceeded(ctx context.Context, out warehouse.Output) (warehouse.RunRecord, bool, error) {
	runs, _, err := c.selectRuns(ctx, out, "succeeded")
	if err != nil {
		return warehouse.RunRecord{}, false, fmt.Errorf("latest succeeded run: %w", err)
	}
	if len(runs) == 0 {
		return warehouse.RunRecord{}, false, nil
	}
	return runs[0], true, nil
}

// PriorSets returns the matched sets of runID with native unit ids.
func (c *Core) PriorSets(ctx context.Context, out warehouse.Output, runID string) (warehouse.PriorSets, error) {
	var ps warehouse.PriorSets
	if _, err := c.Run(ctx, out, runID); err != nil {
		return ps, fmt.Errorf("prior sets: %w", err)
	}
	o, _ := warehouse.NewObjects(out)
	q := c.Render("prior_sets.sql", map[string]string{"Matches": o.Matches, "Unit": warehouse.Quote(out.Unit)})
	var set, id int64
	var sid string
	var treated bool
	var dist, sw *float64
	unit := any(&id)
	if out.IDKind == warehouse.IDText {
		unit = &sid
	}
	err := c.Each(ctx, q, []any{runID}, []any{&set, unit, &treated, &dist, &sw}, func() error {
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
		return ps, fmt.Errorf("prior sets of run %s: %w", runID, err)
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
func (c *Core) DiffRuns(ctx context.Context, out warehouse.Output, a, b string) (warehouse.RunDiff, error) {
	d := warehouse.RunDiff{A: a, B: b}
	for _, id := range []string{a, b} {
		if _, err := c.Run(ctx, out, id); err != nil {
			return d, fmt.Errorf("diff runs: %w", err)
		}
	}
	o, _ := warehouse.NewObjects(out)
	q := c.Render("diff_runs.sql", map[string]string{"Matches": o.Matches, "Unit": warehouse.Quote(out.Unit)})
	if _, err := c.QueryRow(ctx, q, []any{a, b}, &d.Kept, &d.Changed, &d.New, &d.Dropped); err != nil {
		return d, fmt.Errorf("diff runs %s and %s: %w", a, b, err)
	}
	return d, nil
}

// RowCounts counts the rows of every contract table; missing ones are 0.
func (c *Core) RowCounts(ctx context.Context, out warehouse.Output) (map[string]int64, error) {
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return nil, fmt.Errorf("row counts: %w", err)
	}
	counts := map[string]int64{}
	for _, t := range o.C.Tables() {
		cols, err := c.tableColumns(ctx, o.C.Schema, t.Name)
		if err != nil {
			return nil, fmt.Errorf("row counts: %w", err)
		}
		var n int64
		if len(cols) > 0 {
			q := c.Render("count_rows.sql", map[string]string{"Table": warehouse.QuoteQualified(o.C.Schema, t.Name)})
			if _, err := c.QueryRow(ctx, q, nil, &n); err != nil {
				return nil, fmt.Errorf("row counts: %s: %w", t.Name, err)
			}
		}
		counts[t.Name] = n
	}
	return counts, nil
}
