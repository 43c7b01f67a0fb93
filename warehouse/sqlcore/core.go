package sqlcore

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"time"

	sqltext "counterpart/sql"
	"counterpart/warehouse"
)

// Rows is a query result read row by row.
type Rows interface {
	Next() bool
	Scan(dest ...any) error
	Err() error
	Close()
}

// Conn is an engine's one session: every statement of a run goes through
// it, so transactions span calls.
type Conn interface {
	// Exec runs a statement and returns the rows it affected.
	Exec(ctx context.Context, query string, args ...any) (int64, error)
	Query(ctx context.Context, query string, args ...any) (Rows, error)
	// Bulk writes n rows of cols, plus run_id = runID unless runID is ""
	// (LoadTable), into the quoted table, inside the open transaction.
	Bulk(ctx context.Context, table, runID string, cols []BulkCol, n int) error
}

// Dialect is what differs in an engine's SQL and errors.
type Dialect struct {
	// Name is the engine's and its SQL folder's name.
	Name string
	// Types names each contract type in CREATE TABLE; Reported as the
	// engine's table_columns.sql reports it (nil: Types).
	Types, Reported map[warehouse.ColType]string
	// Inlines is true when the planner merges derived tables into their
	// parent and copies each column's defining expression into every
	// reference (Postgres): queries then fence or chain LATERAL scans.
	Inlines bool
	// Partitions is true when the engine can spread a partitioned
	// table's aggregates over nodes (Postgres with postgres_fdw
	// partitions, or a distributed Postgres), so that
	// cohort.partition_column is worth its per-partition grouping. An
	// embedded engine has one node; it ignores the column (the sums are
	// exact either way, so the results are the same).
	Partitions bool
	// SampleKeep is the seed sample's condition on the quoted unit
	// column c.<unit>: a stable hash modulo modulus is 0.
	SampleKeep func(unit string, modulus int) string
	// Err flattens an error of counterpart's own statements; QueryErr
	// classes one of the analyst's query (ErrBadInput or runtime).
	Err, QueryErr func(error) error
	// Scrub removes secrets from text stored in the warehouse (nil: none).
	Scrub func(string) string
	// StatusCheck brings a runs table's status check up to date.
	StatusCheck func(ctx context.Context, c *Core, o *warehouse.Objects) error
	// RunIndex, when set, is the statement that indexes a child table
	// by run_id if it is not yet (schema and table unquoted), run in the
	// publishing transaction; nil when the engine's layout already
	// serves a filter on run_id.
	RunIndex func(schema, table string) string
	// RunPartitions is true when the per-unit run tables are created
	// PARTITION BY LIST (run_id), one partition per run, so that
	// retention drops partitions instead of deleting rows
	// (partition.go; Postgres). Run tables an earlier version created
	// plain keep their layout.
	RunPartitions bool
	// Privileges, when set, checks before the cohort is read that the
	// session may create, insert and drop in the output schema, with a
	// message that names the missing right (the probe covers the rest).
	Privileges func(ctx context.Context, c *Core, out warehouse.Output) error
}

// Adapter is one engine.
type Adapter interface {
	Conn
	// CheckSelect refuses a cohort query that is not a single SELECT,
	// inside the read-only transaction, before anything of it runs.
	CheckSelect(ctx context.Context, text string) error
	// Columns describes the result columns of text without reading rows.
	Columns(ctx context.Context, text string) ([]Column, error)
	// Stream runs text and feeds every row to the sinks open returns
	// (nil: column unused), in result order; column by column within a
	// block of rows is fine (each sink sees its column's rows in order).
	Stream(ctx context.Context, text string, open func([]Column) ([]Sink, error)) error
	Lock(ctx context.Context, out warehouse.Output) (func() error, error)
	User(ctx context.Context) string
	Close() error
}

// Core is an engine's Warehouse: the contract over an Adapter.
type Core struct {
	A Adapter
	D *Dialect
	// Place names the database in messages ("in /data/w.duckdb").
	Place string
	// ReadOnly refuses the write methods (dry runs).
	ReadOnly bool
	// Fault, when set by a test, is called at each step of Publish; a
	// non-nil return fails the publish there (checks the rollback).
	Fault func(step string) error
	// stale says the open publishing transaction changed a table, so
	// that the balance and analysis views are rebuilt (ensureObjects).
	stale bool
	// runTables are the run tables of the open publishing transaction
	// with their layout (ensureObjects; partition.go).
	runTables []runTable
}

var (
	_ warehouse.Warehouse      = (*Core)(nil)
	_ warehouse.InWarehouse    = (*Core)(nil)
	_ warehouse.Sampler        = (*Core)(nil)
	_ warehouse.ScalePublisher = (*Core)(nil)
)

// SQLCore returns c: an engine's Warehouse, which embeds its Core, shows
// it through this method, so that the conformance suite reaches the
// adapter and the fault hook of any engine.
func (c *Core) SQLCore() *Core { return c }

// Engine names the engine.
func (c *Core) Engine() string { return c.D.Name }

// User names the database user.
func (c *Core) User(ctx context.Context) string { return c.A.User(ctx) }

// Close ends the session.
func (c *Core) Close() error { return c.A.Close() }

// Lock takes the study's lock (the adapter's) and then runs the
// pre-flight checks (preflight.go): a run takes the lock before it reads
// the cohort, so a missing schema or right is reported before the read
// and the fit rather than at publish.
func (c *Core) Lock(ctx context.Context, out warehouse.Output) (func() error, error) {
	if err := warehouse.ValidIdent(out.Schema); err != nil {
		return nil, fmt.Errorf("output.schema: %w", err)
	}
	if err := warehouse.ValidIdent(out.Study); err != nil {
		return nil, fmt.Errorf("study: %w", err)
	}
	release, err := c.A.Lock(ctx, out)
	if err != nil {
		return nil, err
	}
	if !c.ReadOnly {
		if err := c.preflight(ctx, out); err != nil {
			return nil, errors.Join(err, release())
		}
	}
	released := false
	return func() error {
		if released {
			return nil
		}
		released = true
		return release()
	}, nil
}

// Render fills an SQL template of the dialect. The templates are
// embedded and tested: failing here is a bug.
func (c *Core) Render(name string, data any) string {
	s, err := sqltext.Render(c.D.Name, name, data)
	if err != nil {
		panic(err)
	}
	return s
}

// Exec runs one of counterpart's own statements, naming what for.
func (c *Core) Exec(ctx context.Context, what, query string, args ...any) (int64, error) {
	n, err := c.A.Exec(ctx, query, args...)
	if err != nil {
		return n, fmt.Errorf("%s: %w", what, c.err(err))
	}
	return n, nil
}

// QueryRow scans the first row of one of counterpart's own queries;
// found is false when there is none.
func (c *Core) QueryRow(ctx context.Context, query string, args []any, dest ...any) (found bool, err error) {
	return c.first(ctx, c.err, query, args, dest)
}

// first scans the first row of query; qerr classes the query's errors.
func (c *Core) first(ctx context.Context, qerr func(error) error, query string, args, dest []any) (found bool, err error) {
	err = c.each(ctx, qerr, query, args, dest, func() error {
		found = true
		return errStop
	})
	return found, err
}

var errStop = errors.New("stop")

// Each runs query and calls fn after scanning each row into dest.
func (c *Core) Each(ctx context.Context, query string, args, dest []any, fn func() error) error {
	return c.each(ctx, c.err, query, args, dest, fn)
}

// each is Each with qerr classing the query's errors (scanning errors
// are never the study's).
func (c *Core) each(ctx context.Context, qerr func(error) error, query string, args, dest []any, fn func() error) error {
	rows, err := c.A.Query(ctx, query, args...)
	if err != nil {
		return qerr(err)
	}
	defer rows.Close()
	for rows.Next() {
		if err := rows.Scan(dest...); err != nil {
			return c.err(err)
		}
		if err := fn(); err == errStop {
			return nil
		} else if err != nil {
			return err
		}
	}
	if err := rows.Err(); err != nil {
		return qerr(err)
	}
	return nil
}

func (c *Core) err(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	return c.D.Err(err)
}

func (c *Core) queryErr(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	return c.D.QueryErr(err)
}

// Rollback ends any open transaction. It ignores the context's
// cancellation: a cancelled run must still release its transaction.
func (c *Core) Rollback(ctx context.Context) {
	ctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
	defer cancel()
	_, _ = c.A.Exec(ctx, "ROLLBACK")
}

func (c *Core) writable() error {
	if c.ReadOnly {
		return errors.New("the warehouse was opened read-only (dry run)")
	}
	return nil
}

func (c *Core) step(name string) error {
	if c.Fault != nil {
		return c.Fault(name)
	}
	return nil
}

// tx runs fn in a transaction of its own, committed when fn succeeds.
func (c *Core) tx(ctx context.Context, fn func() error) error {
	if _, err := c.Exec(ctx, "begin", "BEGIN TRANSACTION"); err != nil {
		return err
	}
	err := fn()
	if err == nil {
		_, err = c.Exec(ctx, "commit", "COMMIT")
	}
	if err != nil {
		c.Rollback(ctx)
	}
	return err
}

// Register adds an engine to the warehouse registry and its dialect SQL
// (the *.sql files under sql/ of files, embedded from the engine's folder)
// to the SQL templates. Engines call it from init.
func Register(e warehouse.Engine, files fs.FS) {
	sub, err := fs.Sub(files, "sql")
	if err != nil {
		panic(err)
	}
	sqltext.RegisterDialect(e.Name, sub)
	warehouse.Register(e)
}
