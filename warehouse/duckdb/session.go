package duckdb

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"time"

	"counterpart/warehouse"
	"counterpart/warehouse/sqlcore"
)

// DuckDB lets one process open a file read-write, or any number of
// processes open it read-only, never both. A run used to hold the file
// read-write from its start to its end, so during the read, the fit and
// the match no dashboard could open it. Each method below therefore opens
// the file for itself and closes it when done: read-only for the cohort
// read, the warehouse-scale queries and the runs listings, read-write only
// for StartRun, Publish (and the warehouse-scale publish transaction,
// from BeginScale to Commit or Rollback), FailRun and CancelRun. Between
// them the run holds nothing but its study lock (a sidecar file), and
// another process may open the file as it likes. Closing a read-write
// session checkpoints the write-ahead log into the file, so what a run
// wrote is in the file itself once the method returns.

// busyRetry is how often a busy file is tried again while --wait lasts.
const busyRetry = 250 * time.Millisecond

// with runs fn on a session that can write when rw (or read-only), opened
// for fn unless an enclosing operation has one open already, and closed
// when the outermost operation ends.
func (w *Warehouse) with(ctx context.Context, rw bool, fn func() error) error {
	rw = rw && !w.readOnly
	if w.conn != nil && rw && !w.rw {
		if w.depth > 0 {
			return fmt.Errorf("duckdb %s: a write inside a read-only operation (a bug)", w.path)
		}
		if err := w.closeSession(); err != nil {
			return err
		}
	}
	if w.conn == nil {
		if err := w.openSession(ctx, rw); err != nil {
			return err
		}
	}
	w.depth++
	err := fn()
	w.depth--
	if w.depth == 0 {
		err = errors.Join(err, w.closeSession())
	}
	return err
}

// session returns the open connection, opening one that can write when
// there is none: a bare statement (a test's fixture) outside any
// operation. The next operation to end closes it.
func (w *Warehouse) session(ctx context.Context) (*sql.Conn, error) {
	if w.conn == nil {
		if err := w.openSession(ctx, !w.readOnly); err != nil {
			return nil, err
		}
	}
	return w.conn, nil
}

// openSession opens the file, waiting up to OpenOptions.Wait while
// another process holds it.
func (w *Warehouse) openSession(ctx context.Context, rw bool) error {
	var deadline time.Time
	for try := 0; ; try++ {
		err := w.tryOpen(ctx, rw)
		if err == nil || !errors.Is(err, warehouse.ErrBusy) || w.opts.Wait <= 0 {
			return err
		}
		if try == 0 {
			deadline = time.Now().Add(w.opts.Wait)
			if w.opts.OnBusy != nil {
				w.opts.OnBusy(err, w.opts.Wait)
			}
		}
		if !time.Now().Add(busyRetry).Before(deadline) {
			return fmt.Errorf("%w (waited %s)", err, w.opts.Wait)
		}
		select {
		case <-ctx.Done():
			return errors.Join(err, ctx.Err())
		case <-time.After(busyRetry):
		}
	}
}

// tryOpen opens the file once.
func (w *Warehouse) tryOpen(ctx context.Context, rw bool) error {
	dsn := w.path + "?"
	if w.params != "" {
		dsn += w.params + "&"
	}
	if !rw {
		dsn += "access_mode=READ_ONLY&"
	}
	if w.opts.NoExternalAccess {
		// Only settable when the database starts; each session is a
		// fresh start, so every statement of the run is covered.
		dsn += "enable_external_access=false&"
	}
	db, err := sql.Open("duckdb", dsn[:len(dsn)-1])
	if err != nil {
		return fmt.Errorf("duckdb %s: %w", w.path, openError(err))
	}
	conn, err := db.Conn(ctx)
	if err != nil {
		db.Close()
		return fmt.Errorf("duckdb %s: %w", w.path, openError(err))
	}
	w.db, w.conn, w.rw = db, conn, rw
	if err := w.setMemory(ctx); err != nil {
		return errors.Join(err, w.closeSession())
	}
	if rw {
		if err := registerBulk(w); err != nil {
			return errors.Join(fmt.Errorf("duckdb %s: register bulk writer: %w", w.path, err), w.closeSession())
		}
	}
	return nil
}

// closeSession closes the open connection and database, if any.
func (w *Warehouse) closeSession() error {
	if w.conn == nil {
		return nil
	}
	err := errors.Join(w.conn.Close(), w.db.Close())
	w.db, w.conn, w.bulk, w.rw = nil, nil, nil, false
	if err != nil {
		return fmt.Errorf("close duckdb %s: %w", w.path, err)
	}
	return nil
}

// readOp and write run one operation of the Core on a session of its own.
func readOp[T any](w *Warehouse, ctx context.Context, fn func() (T, error)) (T, error) {
	var v T
	err := w.with(ctx, false, func() (err error) {
		v, err = fn()
		return err
	})
	return v, err
}

func (w *Warehouse) write(ctx context.Context, fn func() error) error {
	return w.with(ctx, true, fn)
}

// The warehouse.Warehouse methods, each on its own session.

func (w *Warehouse) ReadCohort(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Cohort, error) {
	return readOp(w, ctx, func() (*warehouse.Cohort, error) { return w.Core.ReadCohort(ctx, q) })
}

// Lock takes the study lock and runs the pre-flight checks on a session
// that can write (the probe must be able to create a table).
func (w *Warehouse) Lock(ctx context.Context, out warehouse.Output) (func() error, error) {
	var unlock func() error
	err := w.write(ctx, func() (err error) {
		unlock, err = w.Core.Lock(ctx, out)
		return err
	})
	return unlock, err
}

func (w *Warehouse) StartRun(ctx context.Context, out warehouse.Output, run warehouse.RunRecord) error {
	return w.write(ctx, func() error { return w.Core.StartRun(ctx, out, run) })
}

func (w *Warehouse) Publish(ctx context.Context, out warehouse.Output, p *warehouse.Publication) error {
	return w.write(ctx, func() error { return w.Core.Publish(ctx, out, p) })
}

func (w *Warehouse) FailRun(ctx context.Context, out warehouse.Output, runID, message string) error {
	return w.write(ctx, func() error { return w.Core.FailRun(ctx, out, runID, message) })
}

func (w *Warehouse) CancelRun(ctx context.Context, out warehouse.Output, runID, message string) error {
	return w.write(ctx, func() error { return w.Core.CancelRun(ctx, out, runID, message) })
}

func (w *Warehouse) Runs(ctx context.Context, out warehouse.Output, limit int) ([]warehouse.RunRecord, error) {
	return readOp(w, ctx, func() ([]warehouse.RunRecord, error) { return w.Core.Runs(ctx, out, limit) })
}

func (w *Warehouse) Run(ctx context.Context, out warehouse.Output, runID string) (warehouse.RunRecord, error) {
	return readOp(w, ctx, func() (warehouse.RunRecord, error) { return w.Core.Run(ctx, out, runID) })
}

func (w *Warehouse) LatestSucceeded(ctx context.Context, out warehouse.Output) (warehouse.RunRecord, bool, error) {
	var ok bool
	r, err := readOp(w, ctx, func() (r warehouse.RunRecord, err error) {
		r, ok, err = w.Core.LatestSucceeded(ctx, out)
		return r, err
	})
	return r, ok, err
}

func (w *Warehouse) PriorSets(ctx context.Context, out warehouse.Output, runID string) (warehouse.PriorSets, error) {
	return readOp(w, ctx, func() (warehouse.PriorSets, error) { return w.Core.PriorSets(ctx, out, runID) })
}

func (w *Warehouse) DiffRuns(ctx context.Context, out warehouse.Output, a, b string) (warehouse.RunDiff, error) {
	return readOp(w, ctx, func() (warehouse.RunDiff, error) { return w.Core.DiffRuns(ctx, out, a, b) })
}

func (w *Warehouse) RowCounts(ctx context.Context, out warehouse.Output) (map[string]int64, error) {
	return readOp(w, ctx, func() (map[string]int64, error) { return w.Core.RowCounts(ctx, out) })
}

// The warehouse-scale methods: the fit's queries read, ScoreInto writes
// (inside the publish transaction, whose session it then shares).

func (w *Warehouse) Describe(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Description, error) {
	return readOp(w, ctx, func() (*warehouse.Description, error) { return w.Core.Describe(ctx, q) })
}

func (w *Warehouse) Moments(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, beta []float64, info bool) (*warehouse.Moments, error) {
	return readOp(w, ctx, func() (*warehouse.Moments, error) { return w.Core.Moments(ctx, q, d, beta, info) })
}

func (w *Warehouse) LogitRange(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64) (*warehouse.LogitRange, error) {
	return readOp(w, ctx, func() (*warehouse.LogitRange, error) { return w.Core.LogitRange(ctx, q, d, coef) })
}

func (w *Warehouse) ScoreInto(ctx context.Context, out warehouse.Output, runID string, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, schemes []string) error {
	return w.write(ctx, func() error { return w.Core.ScoreInto(ctx, out, runID, q, d, coef, sup, schemes) })
}

func (w *Warehouse) MatchInput(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64, sup warehouse.Support, exactOn []string) (*warehouse.MatchInput, error) {
	return readOp(w, ctx, func() (*warehouse.MatchInput, error) { return w.Core.MatchInput(ctx, q, d, coef, sup, exactOn) })
}

func (w *Warehouse) UnitColumns(ctx context.Context, q warehouse.CohortQuery) ([][]float64, error) {
	return readOp(w, ctx, func() ([][]float64, error) { return w.Core.UnitColumns(ctx, q) })
}

func (w *Warehouse) SampleDesign(ctx context.Context, q warehouse.CohortQuery, d *warehouse.DesignSQL, modulus int) ([][]float64, []bool, error) {
	var z []bool
	x, err := readOp(w, ctx, func() (x [][]float64, err error) {
		x, z, err = w.Core.SampleDesign(ctx, q, d, modulus)
		return x, err
	})
	return x, z, err
}

func (w *Warehouse) LoadTable(ctx context.Context, schema, table, comment string, cols []warehouse.LoadColumn) error {
	return w.write(ctx, func() error { return w.Core.LoadTable(ctx, schema, table, comment, cols) })
}

// BeginScale opens a session that can write and keeps it until the
// transaction commits or rolls back.
func (w *Warehouse) BeginScale(ctx context.Context, out warehouse.Output, runID string) (warehouse.ScaleTx, error) {
	w.depth++ // held across calls, released by end
	if w.conn != nil && !w.rw && w.depth == 1 {
		if err := w.closeSession(); err != nil {
			w.depth--
			return nil, err
		}
	}
	if w.conn == nil {
		if err := w.openSession(ctx, !w.readOnly); err != nil {
			w.depth--
			return nil, err
		}
	}
	tx, err := w.Core.BeginScale(ctx, out, runID)
	if err != nil {
		w.end()
		return nil, err
	}
	return &scaleTx{ScaleTx: tx, w: w}, nil
}

// end releases the hold BeginScale took.
func (w *Warehouse) end() {
	w.depth--
	if w.depth == 0 {
		_ = w.closeSession()
	}
}

// scaleTx releases the file when the transaction ends.
type scaleTx struct {
	warehouse.ScaleTx
	w    *Warehouse
	done bool
}

func (t *scaleTx) Commit(ctx context.Context) error {
	err := t.ScaleTx.Commit(ctx)
	if err == nil && !t.done {
		t.done = true
		t.w.end()
	}
	return err
}

func (t *scaleTx) Rollback(ctx context.Context) {
	t.ScaleTx.Rollback(ctx)
	if !t.done {
		t.done = true
		t.w.end()
	}
}

var (
	_ warehouse.Warehouse      = (*Warehouse)(nil)
	_ warehouse.InWarehouse    = (*Warehouse)(nil)
	_ warehouse.Sampler        = (*Warehouse)(nil)
	_ warehouse.ScalePublisher = (*Warehouse)(nil)
	_ warehouse.Loader         = (*Warehouse)(nil)
	_ sqlcore.Adapter          = (*adapter)(nil)
)
