package sqlcore

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	sqltext "counterpart/sql"
	"counterpart/warehouse"
)

// StartRun checks that the output schema exists, creates the runs table
// when absent (or brings it up to date) and commits the runs row with
// status running, in one transaction. The other tables and the views are
// created by the publishing transaction (ensureObjects), so that a first
// run killed before its commit leaves only its runs row, which the next
// run marks abandoned. The caller names the step.
func (c *Core) StartRun(ctx context.Context, out warehouse.Output, run warehouse.RunRecord) error {
	if err := c.writable(); err != nil {
		return err
	}
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return err
	}
	if run.RunID == "" {
		return fmt.Errorf("empty run id")
	}
	var n int64
	if _, err := c.QueryRow(ctx, c.Render("schema_exists.sql", nil), []any{out.Schema}, &n); err != nil {
		return fmt.Errorf("look up schema %s: %w", out.Schema, err)
	}
	if n == 0 {
		return fmt.Errorf("%w: output.schema %s does not exist %s; create it (CREATE SCHEMA %s) or name an existing one",
			warehouse.ErrBadInput, out.Schema, c.Place, out.Schema)
	}
	return c.tx(ctx, func() error { return c.startRun(ctx, o, out, run) })
}

func (c *Core) startRun(ctx context.Context, o *warehouse.Objects, out warehouse.Output, run warehouse.RunRecord) error {
	if err := c.EnsureTable(ctx, o.C.Schema, &o.C.Runs, true); err != nil {
		return err
	}
	if err := c.D.StatusCheck(ctx, c, o); err != nil {
		return err
	}
	if c.D.RunPartitions {
		if err := c.startPartitions(ctx, o, run.RunID); err != nil {
			return err
		}
	}
	started := run.StartedAt
	if started.IsZero() {
		started = time.Now().UTC()
	}
	// This run holds the lock, so a run of the study still marked running
	// belongs to a process that died.
	runs := map[string]string{"Runs": o.Runs}
	if _, err := c.Exec(ctx, "mark abandoned runs in "+o.C.Runs.Name, c.Render("abandon_runs.sql", runs),
		run.Study, run.RunID, "abandoned: still running when run "+run.RunID+" started (the process died or lost its connection)"); err != nil {
		return err
	}
	engine := run.Engine
	if engine == "" {
		engine = c.D.Name
	}
	_, err := c.Exec(ctx, fmt.Sprintf("insert run %s into %s", run.RunID, o.C.Runs.Name), c.Render("insert_run.sql", runs),
		run.RunID, run.Study, warehouse.StatusRunning, started, nullTime(run.FinishedAt),
		run.ToolVersion, run.SpecSHA256, nullText(run.SpecJSON), run.CohortSQL, nullText(run.CohortFingerprint),
		nullText(run.CountsJSON), nullText(run.ModelJSON), nullText(run.BalanceJSON), nullText(run.EffectsJSON),
		engine, nullText(run.DBUser), nullText(run.Message), nullText(run.SummaryJSON))
	return err
}

// ensureObjects creates, inside the open publishing transaction, the
// contract's tables (adding columns a table lacks: a new covariate,
// outcome or scheme), the engine's run_id indexes, and the views that
// are absent. Views are replaced only when a table changed (c.stale then
// tells finish to rebuild the balance and analysis views): replacing a
// view takes an exclusive lock on it, and on Postgres a dashboard query
// holding one current view while waiting for another deadlocked with a
// publish that replaced them one by one. An unchanged view needs no
// replacing: the current views find the latest succeeded run when
// queried. A column whose existing type differs from what the study
// needs is an error wrapping ErrBadInput.
func (c *Core) ensureObjects(ctx context.Context, o *warehouse.Objects, out warehouse.Output) error {
	c.stale, c.runTables = false, nil
	parted := partitionedTables(o)
	for _, t := range o.C.Tables() {
		if t == &o.C.Runs {
			continue
		}
		rt := runTable{name: t.Name, quoted: warehouse.QuoteQualified(o.C.Schema, t.Name)}
		if c.D.RunPartitions && parted[t] {
			// New tables get one partition per run; an existing table
			// keeps the layout it was created with (partition.go).
			kind, err := c.tableKind(ctx, o.C.Schema, t.Name)
			if err != nil {
				return err
			}
			rt.partitioned = kind == "" || kind == "p"
		}
		c.runTables = append(c.runTables, rt)
		changed, err := c.ensureTable(ctx, o.C.Schema, t, false, rt.partitioned)
		if err != nil {
			return err
		}
		c.stale = c.stale || changed
		// A partition holds one run: an index on run_id would serve no
		// filter and cost every publish its upkeep.
		if c.D.RunIndex != nil && !rt.partitioned {
			q := c.D.RunIndex(o.C.Schema, t.Name)
			if _, err := c.Exec(ctx, "index "+t.Name+" by run_id", q); err != nil {
				return err
			}
		}
	}
	current := c.stale
	for _, v := range []string{o.C.CurrentCohort, o.C.CurrentScores, o.C.CurrentMatches, o.C.CurrentWeights, o.C.CurrentEffects, o.C.CurrentSurvival} {
		if v == "" || current {
			continue
		}
		ok, err := c.viewExists(ctx, o, v)
		if err != nil {
			return err
		}
		current = !ok
	}
	if current {
		if err := c.currentViews(ctx, o); err != nil {
			return err
		}
	}
	for _, v := range []string{o.C.Balance, o.C.BalanceHistory} {
		if ok, err := c.viewExists(ctx, o, v); err != nil {
			return err
		} else if !ok {
			if err := c.balanceViews(ctx, o, out); err != nil {
				return err
			}
			break
		}
	}
	if ok, err := c.viewExists(ctx, o, o.C.Analysis); err != nil {
		return err
	} else if !ok {
		return c.analysisView(ctx, o)
	}
	return nil
}

// CreateObjects is what the publishing transaction creates
// (ensureObjects), committed on its own: for tests and tools that look
// at the objects without publishing a run.
func (c *Core) CreateObjects(ctx context.Context, out warehouse.Output) error {
	if err := c.writable(); err != nil {
		return err
	}
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return err
	}
	return c.tx(ctx, func() error { return c.ensureObjects(ctx, o, out) })
}

func (c *Core) viewExists(ctx context.Context, o *warehouse.Objects, view string) (bool, error) {
	var n int64
	if _, err := c.QueryRow(ctx, c.Render("view_exists.sql", nil), []any{o.C.Schema, view}, &n); err != nil {
		return false, fmt.Errorf("look up view %s: %w", view, err)
	}
	return n > 0, nil
}

// tableCol is one column as the create_table and add_column templates see
// it.
type tableCol struct {
	Name, Type, Constraint, ColComment string
}

// EnsureTable creates t or adds the columns it lacks. The runs table gets
// its key and the check on status.
func (c *Core) EnsureTable(ctx context.Context, schema string, t *warehouse.Table, runs bool) error {
	_, err := c.ensureTable(ctx, schema, t, runs, false)
	return err
}

// ensureTable is EnsureTable, saying whether it created the table or
// added a column; a table it creates with partitioned set is PARTITION
// BY LIST (run_id) (partition.go).
func (c *Core) ensureTable(ctx context.Context, schema string, t *warehouse.Table, runs, partitioned bool) (changed bool, err error) {
	qt := warehouse.QuoteQualified(schema, t.Name)
	existing, err := c.tableColumns(ctx, schema, t.Name)
	if err != nil {
		return false, err
	}
	if len(existing) == 0 {
		data := struct {
			Table, Comment string
			Columns        []tableCol
			Checks         []string
			PartitionBy    bool
		}{Table: qt, Comment: t.Comment, PartitionBy: partitioned}
		for i, col := range t.Columns {
			tc := tableCol{Name: warehouse.Quote(col.Name), Type: c.D.Types[col.Type], ColComment: col.Comment}
			if col.Name == "run_id" && i == 0 {
				tc.Constraint = "NOT NULL"
			}
			data.Columns = append(data.Columns, tc)
		}
		if runs {
			data.Columns[0].Constraint = "PRIMARY KEY"
			data.Checks = []string{StatusCheckExpr()}
		}
		_, err := c.Exec(ctx, "create table "+t.Name, c.Render("create_table.sql", data))
		return true, err
	}
	reported := c.D.Reported
	if reported == nil {
		reported = c.D.Types
	}
	for _, col := range t.Columns {
		have, ok := existing[col.Name]
		if !ok {
			data := struct{ Table, Name, Type, ColComment string }{qt, warehouse.Quote(col.Name), c.D.Types[col.Type], col.Comment}
			if _, err := c.Exec(ctx, fmt.Sprintf("add column %s to table %s", col.Name, t.Name), c.Render("add_column.sql", data)); err != nil {
				return false, err
			}
			changed = true
			continue
		}
		if have != reported[col.Type] {
			return false, fmt.Errorf("%w: column %s of existing table %s.%s has type %s but the study needs %s; rename the column in cohort.sql or move the old table away",
				warehouse.ErrBadInput, col.Name, schema, t.Name, have, c.D.Types[col.Type])
		}
	}
	return changed, nil
}

// StatusCheckExpr is the runs table's CHECK on status.
func StatusCheckExpr() string {
	lits := make([]string, len(warehouse.Statuses))
	for i, s := range warehouse.Statuses {
		lits[i] = sqltext.Literal(s)
	}
	return "CHECK (status IN (" + strings.Join(lits, ", ") + "))"
}

// RebuildRuns brings the runs table's status check up to date on an
// engine that cannot alter or drop a constraint: in the open
// transaction, a new table is created under another name, filled, the
// old one dropped and the new one renamed (views bind by name when
// queried).
func (c *Core) RebuildRuns(ctx context.Context, o *warehouse.Objects) error {
	tmp := o.C.Runs
	tmp.Name += "_migrating"
	if err := c.EnsureTable(ctx, o.C.Schema, &tmp, true); err != nil {
		return err
	}
	cols := make([]string, len(o.C.Runs.Columns))
	for i, col := range o.C.Runs.Columns {
		cols[i] = warehouse.Quote(col.Name)
	}
	qtmp, list := warehouse.QuoteQualified(o.C.Schema, tmp.Name), strings.Join(cols, ", ")
	for _, stmt := range []string{"INSERT INTO " + qtmp + " (" + list + ") SELECT " + list + " FROM " + o.Runs,
		"DROP TABLE " + o.Runs, "ALTER TABLE " + qtmp + " RENAME TO " + warehouse.Quote(o.C.Runs.Name)} {
		if _, err := c.Exec(ctx, "rebuild "+o.C.Runs.Name+" with the current statuses", stmt); err != nil {
			return err
		}
	}
	return nil
}

// tableColumns returns name → type of an existing table's columns; empty
// when the table does not exist.
func (c *Core) tableColumns(ctx context.Context, schema, table string) (map[string]string, error) {
	cols := map[string]string{}
	var name, typ string
	err := c.Each(ctx, c.Render("table_columns.sql", nil), []any{schema, table}, []any{&name, &typ}, func() error {
		cols[name] = typ
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("columns of %s: %w", table, err)
	}
	return cols, nil
}

// currentViews (re)creates the current_* views; a view's column list is
// fixed when it is created, so they follow the tables' new columns.
func (c *Core) currentViews(ctx context.Context, o *warehouse.Objects) error {
	for _, v := range []struct{ view, table, what string }{
		{o.C.CurrentCohort, o.Cohort, "cohort snapshot"},
		{o.C.CurrentScores, o.Scores, "propensity scores"},
		{o.C.CurrentMatches, o.Matches, "matched sets"},
		{o.C.CurrentWeights, o.Weights, "weights"},
		{o.C.CurrentEffects, o.Effects, "effect estimates"},
		{o.C.CurrentSurvival, o.Survival, "survival curves"},
	} {
		if v.table == "" {
			continue // no time-to-event outcomes
		}
		data := map[string]string{
			"View": warehouse.QuoteQualified(o.C.Schema, v.view), "Table": v.table, "Runs": o.Runs,
			"Comment": "The " + v.what + " of the latest succeeded run.",
		}
		if _, err := c.Exec(ctx, "create view "+v.view, c.Render("current_view.sql", data)); err != nil {
			return err
		}
	}
	return nil
}

// balanceVar and balanceScheme feed the balance_view template.
type balanceVar struct {
	Name, Col, Alias string
	Categorical      bool
}

type balanceScheme struct{ Name, Col string }

// balanceViews (re)creates the balance and balance_history views for the
// covariates and schemes of out.
func (c *Core) balanceViews(ctx context.Context, o *warehouse.Objects, out warehouse.Output) error {
	data := struct {
		View, Runs, Cohort, Matches, Weights, Unit, Treatment, Comment string
		Current, HasNumeric                                            bool
		Vars                                                           []balanceVar
		Schemes                                                        []balanceScheme
	}{Runs: o.Runs, Cohort: o.Cohort, Matches: o.Matches, Weights: o.Weights,
		Unit: warehouse.Quote(out.Unit), Treatment: warehouse.Quote(out.Treatment)}
	for i, cv := range out.Covariates {
		data.Vars = append(data.Vars, balanceVar{Name: cv.Name, Col: warehouse.Quote(cv.Name),
			Alias: "x" + strconv.Itoa(i+1), Categorical: cv.Kind == warehouse.Categorical})
		data.HasNumeric = data.HasNumeric || cv.Kind != warehouse.Categorical
	}
	for _, s := range out.Schemes {
		data.Schemes = append(data.Schemes, balanceScheme{Name: s, Col: warehouse.Quote(s)})
	}
	for _, v := range []struct {
		name    string
		current bool
		comment string
	}{
		{o.C.Balance, true, "Covariate balance of the latest succeeded run: means, SDs, SMD and variance ratio per covariate, level and adjustment (unadjusted, matched, each weighting scheme). SMD uses the unadjusted pooled SD (Austin 2009)."},
		{o.C.BalanceHistory, false, "Covariate balance of every run still kept, computed like the balance view."},
	} {
		data.View, data.Current, data.Comment = warehouse.QuoteQualified(o.C.Schema, v.name), v.current, v.comment
		if _, err := c.Exec(ctx, "create view "+v.name, c.Render("balance_view.sql", data)); err != nil {
			return err
		}
	}
	return nil
}

// analysisView drops and recreates the analysis view for o's covariates,
// outcomes and schemes (sql/common/analysis_view.sql).
func (c *Core) analysisView(ctx context.Context, o *warehouse.Objects) error {
	type col struct{ Name, ColComment string }
	d := struct {
		View, Runs, Cohort, Scores, Matches, Weights, Unit, Comment string
		CohortCols, Schemes                                         []string
		Columns                                                     []col
	}{View: warehouse.QuoteQualified(o.C.Schema, o.C.Analysis), Runs: o.Runs, Cohort: o.Cohort,
		Scores: o.Scores, Matches: o.Matches, Weights: o.Weights, Unit: warehouse.Quote(o.C.Unit),
		Comment: "The latest succeeded run ready for weighted queries: one row per unit of its cohort snapshot with its propensity score, matching summary (matched_weight) and the weight of every scheme."}
	for _, cc := range o.C.Cohort.Columns {
		d.CohortCols = append(d.CohortCols, warehouse.Quote(cc.Name))
	}
	for _, cc := range o.C.Weights.Columns[3:] {
		d.Schemes = append(d.Schemes, warehouse.Quote(cc.Name))
	}
	for _, cc := range o.C.AnalysisColumns {
		d.Columns = append(d.Columns, col{warehouse.Quote(cc.Name), cc.Comment})
	}
	_, err := c.Exec(ctx, "create view "+o.C.Analysis, c.Render("analysis_view.sql", d))
	return err
}

// Publish writes the run's cohort snapshot, scores, matches and weights
// (Conn.Bulk) and its final runs row in one transaction on the engine's
// session, applies retention (out.KeepRuns) and, for a succeeded run,
// rebuilds the balance views for this run's covariates and schemes. A
// failure anywhere, including a cancelled context, rolls every row back
// and leaves the previous run current. The caller names the step.
func (c *Core) Publish(ctx context.Context, out warehouse.Output, p *warehouse.Publication) error {
	if err := c.writable(); err != nil {
		return err
	}
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return err
	}
	if err := warehouse.CheckPublication(out, p); err != nil {
		return err
	}
	if _, err := c.Exec(ctx, "begin", "BEGIN TRANSACTION"); err != nil {
		return err
	}
	err = c.ensureObjects(ctx, o, out)
	if err == nil && (p.Cohort != nil || len(p.Survival) > 0) {
		// Only a run that writes rows gets partitions: a skipped run,
		// which may never expire, must not leave empty ones behind.
		err = c.createPartitions(ctx, o, p.Run.RunID, c.runTables)
	}
	if err == nil {
		err = c.finish(ctx, o, out, p, func() error { return c.writeAll(ctx, o, out, p) })
	}
	if err == nil {
		err = c.commit(ctx)
	}
	if err != nil {
		c.Rollback(ctx)
		return fmt.Errorf("run %s: %w", p.Run.RunID, err)
	}
	return nil
}

func (c *Core) commit(ctx context.Context) error {
	if err := c.step("commit"); err != nil {
		return err
	}
	_, err := c.Exec(ctx, "commit", "COMMIT")
	return err
}

// finish writes the final runs row, then rows (when not nil), the
// effects, retention and the views, inside the open transaction.
func (c *Core) finish(ctx context.Context, o *warehouse.Objects, out warehouse.Output, p *warehouse.Publication, rows func() error) error {
	r := p.Run
	finished := r.FinishedAt
	if finished.IsZero() {
		finished = time.Now().UTC()
	}
	k, err := c.Exec(ctx, "update "+o.C.Runs.Name, c.Render("finish_run.sql", map[string]string{"Runs": o.Runs}),
		r.RunID, r.Status, finished, nullText(r.CohortFingerprint), nullText(r.CountsJSON),
		nullText(r.ModelJSON), nullText(r.BalanceJSON), nullText(r.EffectsJSON), nullText(r.Message), nullText(r.SummaryJSON))
	if err != nil {
		return err
	}
	if k != 1 {
		return fmt.Errorf("run %s is not a running run in %s (StartRun must come first, and a run is published once)", r.RunID, o.C.Runs.Name)
	}
	if err := c.step("runs"); err != nil {
		return err
	}
	if rows != nil && p.Cohort != nil {
		if err := rows(); err != nil {
			return err
		}
	}
	if err := c.insertEffects(ctx, o, r.RunID, p.Effects); err != nil {
		return err
	}
	if err := c.writeSurvival(ctx, o, r.RunID, p.Survival); err != nil {
		return err
	}
	if err := c.step("effects"); err != nil {
		return err
	}
	if out.KeepRuns > 0 || out.KeepFailedDays > 0 {
		if err := c.retain(ctx, o, r.RunID, out); err != nil {
			return err
		}
		if err := c.step("retention"); err != nil {
			return err
		}
	} else if _, err := c.retainPartitions(ctx, o, nil); err != nil {
		// No retention: only the empty partitions of runs that never
		// published go (partition.go).
		return err
	}
	// A changed table (a new covariate or scheme, whatever the run's
	// status) gets views over its new columns; a covariate the current
	// run lacks has no rows there.
	if c.stale {
		if err := c.balanceViews(ctx, o, out); err != nil {
			return err
		}
		if err := c.analysisView(ctx, o); err != nil {
			return err
		}
	}
	if err := c.step("views"); err != nil {
		return err
	}
	return c.stampFinished(ctx, o, p)
}

// stampFinished sets the run's finished_at as the last statement before
// COMMIT, so that it is the end of the run and its duration in the runs
// table includes writing the tables; p.Run.FinishedAt gets the same
// time, for the run's summary. With p.Seal the time comes from the run's
// own clock and the same statement stores the final summary, whose
// publish stage ends at this statement: the row's finished_at, its
// duration and its summary's times then agree.
func (c *Core) stampFinished(ctx context.Context, o *warehouse.Objects, p *warehouse.Publication) error {
	// Both engines keep microseconds: the summary then shows the stored
	// value exactly.
	end := time.Now().UTC().Truncate(time.Microsecond)
	q := "UPDATE " + o.Runs + " SET finished_at = $2 WHERE run_id = $1"
	args := []any{p.Run.RunID, end}
	if p.Seal != nil {
		var summary string
		end, summary = p.Seal()
		end = end.UTC().Truncate(time.Microsecond)
		q = "UPDATE " + o.Runs + " SET finished_at = $2, summary = $3 WHERE run_id = $1"
		args = []any{p.Run.RunID, end, nullText(summary)}
		p.Run.SummaryJSON = summary
	}
	if _, err := c.Exec(ctx, "stamp the end of run "+p.Run.RunID, q, args...); err != nil {
		return err
	}
	p.Run.FinishedAt = end
	return nil
}

// retain removes the runs retention expires: their partitions of the
// partitioned run tables are dropped (partition.go), their rows of the
// other tables deleted, child tables first and the runs table last. When
// the partitions cannot be locked in time, the rows are deleted from
// the partitioned tables too.
func (c *Core) retain(ctx context.Context, o *warehouse.Objects, runID string, out warehouse.Output) error {
	ids, err := c.ExpiredRuns(ctx, o, runID, out.KeepRuns, out.KeepFailedDays)
	if err != nil {
		return err
	}
	dropped, err := c.retainPartitions(ctx, o, ids)
	if err != nil || len(ids) == 0 {
		return err
	}
	skip := map[string]bool{}
	for _, t := range c.runTables {
		skip[t.quoted] = t.partitioned && dropped
	}
	params := warehouse.Placeholders(len(ids))
	for _, t := range o.RetentionTables() {
		if skip[t] {
			continue
		}
		q := c.Render("retention.sql", map[string]string{"Table": t, "Params": params})
		if _, err := c.Exec(ctx, "retention on "+t, q, ids...); err != nil {
			return err
		}
	}
	return nil
}

// ExpiredRuns lists the runs retention deletes (expired_runs.sql), as
// bound values for retention.sql: succeeded runs beyond the newest keep
// (0: none), other finished runs started more than keepDays days ago (0:
// none). Failures do not count against keep, so a few crashed nights
// never push out the succeeded runs a study keeps.
func (c *Core) ExpiredRuns(ctx context.Context, o *warehouse.Objects, runID string, keep, keepDays int) ([]any, error) {
	var ids []any
	var id string
	var cutoff any // NULL: no age limit
	if keepDays > 0 {
		cutoff = time.Now().UTC().AddDate(0, 0, -keepDays)
	}
	err := c.Each(ctx, c.Render("expired_runs.sql", map[string]string{"Runs": o.Runs}), []any{runID, int64(keep), cutoff}, []any{&id}, func() error {
		ids = append(ids, id)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("retention: list expired runs: %w", err)
	}
	return ids, nil
}

// insertEffects writes the run's effect rows; NaN becomes NULL.
func (c *Core) insertEffects(ctx context.Context, o *warehouse.Objects, runID string, effects []warehouse.EffectRecord) error {
	q := c.Render("insert_effect.sql", map[string]string{"Effects": o.Effects})
	for _, e := range effects {
		_, err := c.Exec(ctx, "insert into "+o.C.Effects.Name, q, runID, e.Outcome, e.Adjustment, e.Estimand, e.Contrast, e.Method,
			nullFloat(e.Estimate), nullFloat(e.StdError), nullFloat(e.CILow), nullFloat(e.CIHigh), nullFloat(e.PValue),
			int64(e.NTreated), int64(e.NControl), int64(e.NMissing),
			nullFloat(e.EValue), nullFloat(e.EValueCI), nullFloat(e.RosenbaumGamma), nullFloat(e.Horizon))
		if err != nil {
			return err
		}
	}
	return nil
}

// FailRun marks a running run as failed, with its finish time and message.
// It first rolls back whatever transaction the failure left open, then
// updates in a transaction of its own. A run that is no longer running (it
// was published) keeps its status and FailRun says so.
func (c *Core) FailRun(ctx context.Context, out warehouse.Output, runID, message string) error {
	return c.endRun(ctx, out, runID, message, warehouse.StatusFailed)
}

// CancelRun implements warehouse.Warehouse.
func (c *Core) CancelRun(ctx context.Context, out warehouse.Output, runID, message string) error {
	return c.endRun(ctx, out, runID, message, warehouse.StatusCancelled)
}

// endRun gives a running run its final failed or cancelled status.
func (c *Core) endRun(ctx context.Context, out warehouse.Output, runID, message, status string) error {
	if err := c.writable(); err != nil {
		return err
	}
	c.Rollback(ctx)
	runs := out.Prefix + "runs"
	if err := warehouse.ValidIdent(out.Schema); err != nil {
		return fmt.Errorf("output.schema: %w", err)
	}
	if err := warehouse.ValidIdent(runs); err != nil {
		return fmt.Errorf("output.prefix: %w", err)
	}
	if c.D.Scrub != nil {
		message = c.D.Scrub(message)
	}
	q := c.Render("fail_run.sql", map[string]string{"Runs": warehouse.QuoteQualified(out.Schema, runs)})
	k, err := c.Exec(ctx, status+" run "+runID, q, runID, time.Now().UTC(), message, status)
	if err != nil {
		return err
	}
	if k == 0 {
		return fmt.Errorf("mark run %s %s: no running run with that id in %s.%s", runID, status, out.Schema, runs)
	}
	return nil
}

// nullText stores an empty string as NULL: JSON columns cannot hold "".
func nullText(s string) any {
	if s == "" {
		return nil
	}
	return s
}

func nullTime(t time.Time) any {
	if t.IsZero() {
		return nil
	}
	return t
}

// nullFloat stores NaN (and ±Inf, which no column means) as NULL.
func nullFloat(f float64) any {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return nil
	}
	return f
}
