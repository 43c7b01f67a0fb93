package postgres

import (
	"context"
	"fmt"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"

	sqltext "counterpart/sql"
	"counterpart/warehouse"
)

// pgTypeName is the Postgres type of each contract column type, spelt as
// format_type reports it (table_columns.sql), so one map serves both
// CREATE TABLE and the type-conflict check. JSON columns are jsonb: stored
// parsed, queryable with the JSON operators.
var pgTypeName = map[warehouse.ColType]string{
	warehouse.TypeText: "text", warehouse.TypeBigInt: "bigint", warehouse.TypeDouble: "double precision",
	warehouse.TypeBool: "boolean", warehouse.TypeTimestampTZ: "timestamp with time zone", warehouse.TypeJSON: "jsonb",
}

// render fills an SQL template of this dialect.
func render(name string, data any) string {
	s, err := sqltext.Render(dialect, name, data)
	if err != nil {
		// The templates are embedded and tested: failing here is a bug.
		panic(err)
	}
	return s
}

func (w *Warehouse) writable(step string) error {
	if w.readOnly {
		return fmt.Errorf("%s: the warehouse was opened read-only (dry run)", step)
	}
	return nil
}

// schemaExists refuses a missing output schema before anything is
// written: the engine never creates schemas.
func (w *Warehouse) schemaExists(ctx context.Context, schema string) error {
	var n int
	if err := w.conn.QueryRow(ctx, render("schema_exists.sql", nil), schema).Scan(&n); err != nil {
		return fmt.Errorf("look up schema %s: %w", schema, w.dbErr(err))
	}
	if n == 0 {
		return fmt.Errorf("%w: output.schema %s does not exist in database %s; create it (CREATE SCHEMA %s) or name an existing one",
			warehouse.ErrBadInput, schema, w.cfg.Database, schema)
	}
	return nil
}

// StartRun checks that the output schema exists, creates the contract's
// tables with their comments (adding columns a table lacks: a new
// covariate, outcome or scheme) and the current views, creates the
// balance views when absent, and commits the runs row with status
// running, all in one transaction. A column whose existing type differs
// from what the study needs is an error wrapping warehouse.ErrBadInput.
func (w *Warehouse) StartRun(ctx context.Context, out warehouse.Output, run warehouse.RunRecord) error {
	if err := w.writable("start run"); err != nil {
		return err
	}
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return fmt.Errorf("start run: %w", err)
	}
	if run.RunID == "" {
		return fmt.Errorf("start run: empty run id")
	}
	if err := w.schemaExists(ctx, out.Schema); err != nil {
		return fmt.Errorf("start run: %w", err)
	}
	if _, err := w.conn.Exec(ctx, "BEGIN"); err != nil {
		return fmt.Errorf("start run: begin: %w", w.dbErr(err))
	}
	err = w.startRun(ctx, o, out, run)
	if err == nil {
		if _, err = w.conn.Exec(ctx, "COMMIT"); err != nil {
			err = fmt.Errorf("commit: %w", w.dbErr(err))
		}
	}
	if err != nil {
		w.rollback(ctx)
		return fmt.Errorf("start run: %w", err)
	}
	return nil
}

func (w *Warehouse) startRun(ctx context.Context, o *warehouse.Objects, out warehouse.Output, run warehouse.RunRecord) error {
	for _, t := range o.C.Tables() {
		if err := w.ensureTable(ctx, o.C.Schema, t, t == &o.C.Runs); err != nil {
			return err
		}
	}
	if err := w.currentViews(ctx, o); err != nil {
		return err
	}
	for _, v := range []string{o.C.Balance, o.C.BalanceHistory} {
		var n int
		if err := w.conn.QueryRow(ctx, render("view_exists.sql", nil), o.C.Schema, v).Scan(&n); err != nil {
			return fmt.Errorf("look up view %s: %w", v, w.dbErr(err))
		}
		if n == 0 {
			if err := w.balanceViews(ctx, o, out); err != nil {
				return err
			}
			break
		}
	}
	if err := w.statusCheck(ctx, o); err != nil {
		return err
	}
	var n int
	if err := w.conn.QueryRow(ctx, render("view_exists.sql", nil), o.C.Schema, o.C.Analysis).Scan(&n); err != nil {
		return fmt.Errorf("look up view %s: %w", o.C.Analysis, w.dbErr(err))
	}
	if n == 0 {
		if err := w.analysisView(ctx, o); err != nil {
			return err
		}
	}
	started := run.StartedAt
	if started.IsZero() {
		started = time.Now().UTC()
	}
	// This run holds the lock, so a run of the study still marked running
	// belongs to a process that died.
	if _, err := w.conn.Exec(ctx, render("abandon_runs.sql", map[string]string{"Runs": o.Runs}),
		run.Study, run.RunID, started, "abandoned: still running when run "+run.RunID+" started (the process died or lost its connection)"); err != nil {
		return fmt.Errorf("mark abandoned runs in %s: %w", o.C.Runs.Name, w.dbErr(err))
	}
	_, err := w.conn.Exec(ctx, render("insert_run.sql", map[string]string{"Runs": o.Runs}),
		run.RunID, run.Study, warehouse.StatusRunning, started, nullTime(run.FinishedAt),
		run.ToolVersion, run.SpecSHA256, nullText(run.SpecJSON), run.CohortSQL, nullText(run.CohortFingerprint),
		nullText(run.CountsJSON), nullText(run.ModelJSON), nullText(run.BalanceJSON), nullText(run.EffectsJSON),
		engineName(run.Engine), nullText(run.DBUser), nullText(run.Message), nullText(run.SummaryJSON))
	if err != nil {
		return fmt.Errorf("insert run %s into %s: %w", run.RunID, o.C.Runs.Name, w.dbErr(err))
	}
	return nil
}

// tableCol is one column as the create_table and add_column templates see
// it.
type tableCol struct {
	Name, Type, Constraint, ColComment string
}

// ensureTable creates t or adds the columns it lacks. The runs table gets
// its key and the check on status.
func (w *Warehouse) ensureTable(ctx context.Context, schema string, t *warehouse.Table, runs bool) error {
	qt := warehouse.QuoteQualified(schema, t.Name)
	existing, err := w.tableColumns(ctx, schema, t.Name)
	if err != nil {
		return err
	}
	if len(existing) == 0 {
		data := struct {
			Table, Comment string
			Columns        []tableCol
			Checks         []string
		}{Table: qt, Comment: t.Comment}
		for i, c := range t.Columns {
			tc := tableCol{Name: warehouse.Quote(c.Name), Type: pgTypeName[c.Type], ColComment: c.Comment}
			if c.Name == "run_id" && i == 0 {
				tc.Constraint = "NOT NULL"
			}
			data.Columns = append(data.Columns, tc)
		}
		if runs {
			data.Columns[0].Constraint = "PRIMARY KEY"
			check := "CHECK (status IN ("
			for i, s := range warehouse.Statuses {
				if i > 0 {
					check += ", "
				}
				check += sqltext.Literal(s)
			}
			data.Checks = []string{check + "))"}
		}
		if _, err := w.conn.Exec(ctx, render("create_table.sql", data)); err != nil {
			return fmt.Errorf("create table %s: %w", t.Name, w.dbErr(err))
		}
		return nil
	}
	for _, c := range t.Columns {
		have, ok := existing[c.Name]
		if !ok {
			data := struct{ Table, Name, Type, ColComment string }{qt, warehouse.Quote(c.Name), pgTypeName[c.Type], c.Comment}
			if _, err := w.conn.Exec(ctx, render("add_column.sql", data)); err != nil {
				return fmt.Errorf("add column %s to table %s: %w", c.Name, t.Name, w.dbErr(err))
			}
			continue
		}
		if have != pgTypeName[c.Type] {
			return fmt.Errorf("%w: column %s of existing table %s.%s has type %s but the study needs %s; rename the column in cohort.sql or move the old table away",
				warehouse.ErrBadInput, c.Name, schema, t.Name, have, pgTypeName[c.Type])
		}
	}
	return nil
}

// tableColumns returns name → type of an existing table's columns; empty
// when the table does not exist.
func (w *Warehouse) tableColumns(ctx context.Context, schema, table string) (map[string]string, error) {
	rows, err := w.conn.Query(ctx, render("table_columns.sql", nil), schema, table)
	if err != nil {
		return nil, fmt.Errorf("columns of %s: %w", table, w.dbErr(err))
	}
	cols := map[string]string{}
	var name, typ string
	_, err = pgx.ForEachRow(rows, []any{&name, &typ}, func() error {
		cols[name] = typ
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("columns of %s: %w", table, w.dbErr(err))
	}
	return cols, nil
}

// currentViews (re)creates the four current_* views; a view's column list
// is fixed when it is created, so they follow the tables' new columns.
func (w *Warehouse) currentViews(ctx context.Context, o *warehouse.Objects) error {
	for _, v := range []struct{ view, table, what string }{
		{o.C.CurrentCohort, o.Cohort, "cohort snapshot"},
		{o.C.CurrentScores, o.Scores, "propensity scores"},
		{o.C.CurrentMatches, o.Matches, "matched sets"},
		{o.C.CurrentWeights, o.Weights, "weights"},
		{o.C.CurrentEffects, o.Effects, "effect estimates"},
	} {
		data := map[string]string{
			"View": warehouse.QuoteQualified(o.C.Schema, v.view), "Table": v.table, "Runs": o.Runs,
			"Comment": "The " + v.what + " of the latest succeeded run.",
		}
		if _, err := w.conn.Exec(ctx, render("current_view.sql", data)); err != nil {
			return fmt.Errorf("create view %s: %w", v.view, w.dbErr(err))
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
func (w *Warehouse) balanceViews(ctx context.Context, o *warehouse.Objects, out warehouse.Output) error {
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
		if _, err := w.conn.Exec(ctx, render("balance_view.sql", data)); err != nil {
			return fmt.Errorf("create view %s: %w", v.name, w.dbErr(err))
		}
	}
	return nil
}

// Publish writes the run's cohort snapshot, scores, matches and weights
// (COPY FROM STDIN in binary format) and its final runs row in one
// transaction on the run's connection, applies retention (out.KeepRuns)
// and, for a succeeded run, rebuilds the balance views for this run's
// covariates and schemes. Postgres DDL is transactional, so the views'
// replacement commits with the rows. A failure anywhere, a cancelled
// context, or the process dying (the server aborts the transaction of a
// dropped connection) leaves none of it visible and the previous run
// current.
func (w *Warehouse) Publish(ctx context.Context, out warehouse.Output, p *warehouse.Publication) error {
	if err := w.writable("publish"); err != nil {
		return err
	}
	o, err := warehouse.NewObjects(out)
	if err != nil {
		return fmt.Errorf("publish: %w", err)
	}
	if err := warehouse.CheckPublication(out, p); err != nil {
		return fmt.Errorf("publish: %w", err)
	}
	if _, err := w.conn.Exec(ctx, "BEGIN"); err != nil {
		return fmt.Errorf("publish: begin: %w", w.dbErr(err))
	}
	err = w.publish(ctx, o, out, p)
	if err == nil {
		err = w.step("commit")
	}
	if err == nil {
		if _, err = w.conn.Exec(ctx, "COMMIT"); err != nil {
			err = fmt.Errorf("commit: %w", w.dbErr(err))
		}
	}
	if err != nil {
		w.rollback(ctx)
		return fmt.Errorf("publish run %s: %w", p.Run.RunID, err)
	}
	return nil
}

// step runs the test fault hook.
func (w *Warehouse) step(name string) error {
	if w.fault != nil {
		return w.fault(name)
	}
	return nil
}

func (w *Warehouse) publish(ctx context.Context, o *warehouse.Objects, out warehouse.Output, p *warehouse.Publication) error {
	if p.InTx != nil {
		// Warehouse-scale mode: matches from memory, then the caller's
		// INSERT … SELECT statements, which may settle the run's status.
		if err := w.copyMatches(ctx, o, out, p); err != nil {
			return err
		}
		if err := w.step("matches"); err != nil {
			return err
		}
		if err := p.InTx(ctx); err != nil {
			return fmt.Errorf("in-warehouse rows: %w", err)
		}
		if err := w.step("in-warehouse"); err != nil {
			return err
		}
	}
	r := p.Run
	finished := r.FinishedAt
	if finished.IsZero() {
		finished = time.Now().UTC()
	}
	tag, err := w.conn.Exec(ctx, render("finish_run.sql", map[string]string{"Runs": o.Runs}),
		r.RunID, r.Status, finished, nullText(r.CohortFingerprint), nullText(r.CountsJSON),
		nullText(r.ModelJSON), nullText(r.BalanceJSON), nullText(r.EffectsJSON), nullText(r.Message), nullText(r.SummaryJSON))
	if err != nil {
		return fmt.Errorf("update %s: %w", o.C.Runs.Name, w.dbErr(err))
	}
	if tag.RowsAffected() != 1 {
		return fmt.Errorf("run %s is not a running run in %s (StartRun must come first, and a run is published once)", r.RunID, o.C.Runs.Name)
	}
	if err := w.step("runs"); err != nil {
		return err
	}
	if p.Cohort != nil && p.InTx == nil {
		if err := w.copyAll(ctx, o, out, p); err != nil {
			return err
		}
	}
	if err := w.insertEffects(ctx, o, r.RunID, p.Effects); err != nil {
		return err
	}
	if err := w.step("effects"); err != nil {
		return err
	}
	if out.KeepRuns > 0 {
		ids, err := w.expiredRuns(ctx, o, r.RunID, out.KeepRuns)
		if err != nil {
			return err
		}
		if len(ids) > 0 {
			params := warehouse.Placeholders(len(ids))
			for _, t := range o.RetentionTables() {
				q := render("retention.sql", map[string]string{"Table": t, "Params": params})
				if _, err := w.conn.Exec(ctx, q, ids...); err != nil {
					return fmt.Errorf("retention on %s: %w", t, w.dbErr(err))
				}
			}
		}
		if err := w.step("retention"); err != nil {
			return err
		}
	}
	if err := w.currentViews(ctx, o); err != nil {
		return err
	}
	if r.Status == warehouse.StatusSucceeded {
		if err := w.balanceViews(ctx, o, out); err != nil {
			return err
		}
		if err := w.analysisView(ctx, o); err != nil {
			return err
		}
	}
	return w.step("views")
}

// FailRun marks a running run as failed, with its finish time and message.
// It first rolls back whatever transaction the failure left open, then
// updates in a transaction of its own. A run that is no longer running (it
// was published) keeps its status and FailRun says so.
func (w *Warehouse) FailRun(ctx context.Context, out warehouse.Output, runID, message string) error {
	if err := w.writable("fail run"); err != nil {
		return err
	}
	w.rollback(ctx)
	runs := out.Prefix + "runs"
	if err := warehouse.ValidIdent(out.Schema); err != nil {
		return fmt.Errorf("fail run: output.schema: %w", err)
	}
	if err := warehouse.ValidIdent(runs); err != nil {
		return fmt.Errorf("fail run: output.prefix: %w", err)
	}
	q := render("fail_run.sql", map[string]string{"Runs": warehouse.QuoteQualified(out.Schema, runs)})
	tag, err := w.conn.Exec(ctx, q, runID, time.Now().UTC(), scrub(message, w.secrets))
	if err != nil {
		return fmt.Errorf("fail run %s: %w", runID, w.dbErr(err))
	}
	if tag.RowsAffected() == 0 {
		return fmt.Errorf("fail run %s: no running run with that id in %s.%s", runID, out.Schema, runs)
	}
	return nil
}

// engineName records the engine the caller names, else this one.
func engineName(e string) string {
	if e == "" {
		return "postgres"
	}
	return e
}

// nullText stores an empty string as NULL: jsonb columns cannot hold "".
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

// expiredRuns lists the runs retention deletes (expired_runs.sql), as
// bound values for retention.sql.
func (w *Warehouse) expiredRuns(ctx context.Context, o *warehouse.Objects, runID string, keep int) ([]any, error) {
	rows, err := w.conn.Query(ctx, render("expired_runs.sql", map[string]string{"Runs": o.Runs}), runID, keep)
	if err != nil {
		return nil, fmt.Errorf("retention: list expired runs: %w", w.dbErr(err))
	}
	ids, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return nil, fmt.Errorf("retention: list expired runs: %w", w.dbErr(err))
	}
	out := make([]any, len(ids))
	for i, id := range ids {
		out[i] = id
	}
	return out, nil
}
