package duckdb

import (
	"context"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
	"counterpart/warehouse/filelock"
	"counterpart/warehouse/sqlcore"
)

//go:embed sql/*.sql
var sqlFiles embed.FS

func init() {
	sqlcore.Register(warehouse.Engine{
		Name: "duckdb", Default: true, DefaultSchema: "main", DSNHint: "a DuckDB file path",
		// A file named relative to the study file is found beside it, so
		// a study runs the same from cron as from its own directory.
		ResolveDSN: func(dsn, dir string) string {
			if filepath.IsAbs(dsn) || dsn == ":memory:" {
				return dsn
			}
			return filepath.Join(dir, dsn)
		},
		Open: func(ctx context.Context, dsn string, o warehouse.OpenOptions) (warehouse.Warehouse, error) {
			if o.ReadOnly {
				return OpenReadOnlyWith(ctx, dsn, o)
			}
			return OpenWith(ctx, dsn, o)
		},
	}, sqlFiles)
}

// Warehouse is a DuckDB database file, opened only for the operations
// that need it (session.go): DuckDB lets one process write a file or any
// number read it, so a run that held the file from start to end locked
// every dashboard out for its whole length. It is not safe for concurrent
// use: one run owns it, and an operation's statements share one
// connection.
type Warehouse struct {
	*sqlcore.Core
	path string
	// params are the DuckDB settings of the dsn (threads=4), kept for
	// every open.
	params string
	// readOnly opens every session with access_mode READ_ONLY (dry runs).
	readOnly bool
	opts     warehouse.OpenOptions
	// memLimit, when > 0, is the memory_limit (bytes) every session sets
	// (TuneForScale).
	memLimit int64

	// The open session, when there is one: rw says it can write, depth
	// counts the operations using it (0: opened by a bare statement, a
	// test fixture, and closed by the next operation's end).
	db    *sql.DB
	conn  *sql.Conn
	rw    bool
	depth int
	// bulk is the session's table function bulk writes go through (nil
	// read-only).
	bulk *bulk
}

// adapter is the Warehouse as sqlcore sees it.
type adapter Warehouse

var dialect = &sqlcore.Dialect{
	Name: "duckdb",
	Types: map[warehouse.ColType]string{
		warehouse.TypeText: "VARCHAR", warehouse.TypeBigInt: "BIGINT", warehouse.TypeDouble: "DOUBLE",
		warehouse.TypeBool: "BOOLEAN", warehouse.TypeTimestampTZ: "TIMESTAMPTZ", warehouse.TypeJSON: "JSON",
	},
	// duckdb_columns() spells TIMESTAMPTZ out.
	Reported: map[warehouse.ColType]string{
		warehouse.TypeText: "VARCHAR", warehouse.TypeBigInt: "BIGINT", warehouse.TypeDouble: "DOUBLE",
		warehouse.TypeBool: "BOOLEAN", warehouse.TypeTimestampTZ: "TIMESTAMP WITH TIME ZONE", warehouse.TypeJSON: "JSON",
	},
	// DuckDB's hash() of the unit id is the same on every run.
	SampleKeep: func(unit string, modulus int) string { return fmt.Sprintf("hash(%s) %% %d = 0", unit, modulus) },
	Err:        func(err error) error { return sqlcore.Flat(sqlcore.OneLine(err), err) },
	QueryErr:   queryError,
	// DuckDB cannot alter or drop a constraint, so a runs table from
	// before the abandoned or cancelled status is rebuilt
	// (Core.RebuildRuns); the newest status tells an up-to-date check.
	StatusCheck: func(ctx context.Context, c *sqlcore.Core, o *warehouse.Objects) error {
		var expr *string
		found, err := c.QueryRow(ctx, c.Render("status_check.sql", nil), []any{o.C.Schema, o.C.Runs.Name}, &expr)
		if err != nil {
			return fmt.Errorf("status check of %s: %w", o.C.Runs.Name, err)
		}
		if !found || (expr != nil && strings.Contains(*expr, warehouse.StatusCancelled)) {
			return nil
		}
		return c.RebuildRuns(ctx, o)
	},
}

// Open opens (creating when absent) the DuckDB database file named by dsn
// for a run. The dsn is a file path, optionally followed by DuckDB settings
// (path?threads=4). The directory must exist. The file is opened once to
// check it (and create it) and then only for each operation; a file
// another process holds gives an error wrapping warehouse.ErrBusy.
func Open(ctx context.Context, dsn string) (*Warehouse, error) {
	return OpenWith(ctx, dsn, warehouse.OpenOptions{})
}

// OpenWith is Open with the study's open options (Wait, NoExternalAccess).
func OpenWith(ctx context.Context, dsn string, o warehouse.OpenOptions) (*Warehouse, error) {
	path, params, _ := strings.Cut(dsn, "?")
	if path == "" || path == ":memory:" {
		return nil, fmt.Errorf("duckdb: %w: warehouse.dsn %q is not a file path; give the path of a DuckDB file", warehouse.ErrBadInput, dsn)
	}
	dir := filepath.Dir(path)
	if st, err := os.Stat(dir); err != nil || !st.IsDir() {
		return nil, fmt.Errorf("duckdb: %w: directory %s of warehouse.dsn does not exist; create it or fix the path", warehouse.ErrBadInput, dir)
	}
	return newWarehouse(ctx, path, params, false, o)
}

// OpenReadOnly opens an existing DuckDB file with access_mode READ_ONLY, for
// dry runs: nothing done through it can write, and other read-only
// processes may share the file. A missing file is an error.
func OpenReadOnly(ctx context.Context, dsn string) (*Warehouse, error) {
	return OpenReadOnlyWith(ctx, dsn, warehouse.OpenOptions{ReadOnly: true})
}

// OpenReadOnlyWith is OpenReadOnly with the study's open options.
func OpenReadOnlyWith(ctx context.Context, dsn string, o warehouse.OpenOptions) (*Warehouse, error) {
	path, params, _ := strings.Cut(dsn, "?")
	if st, err := os.Stat(path); err != nil || st.IsDir() {
		return nil, fmt.Errorf("duckdb read-only: %w: warehouse.dsn %s is not an existing DuckDB file", warehouse.ErrBadInput, path)
	}
	return newWarehouse(ctx, path, params, true, o)
}

// newWarehouse checks that the file opens (creating it read-write when
// absent, read-only otherwise, so that a busy file is reported before the
// run starts) and closes it again.
func newWarehouse(ctx context.Context, path, params string, readOnly bool, o warehouse.OpenOptions) (*Warehouse, error) {
	w := &Warehouse{path: path, params: params, readOnly: readOnly, opts: o}
	w.Core = &sqlcore.Core{A: (*adapter)(w), D: dialect, Place: "in " + path, ReadOnly: readOnly}
	_, err := os.Stat(path)
	if err := w.with(ctx, !readOnly && errors.Is(err, os.ErrNotExist), func() error { return nil }); err != nil {
		return nil, err
	}
	return w, nil
}

// openError maps DuckDB's own file lock (another process has the file open
// for writing, or reading while we want to write) to warehouse.ErrBusy:
// not the study lock's exit code, since it is not this study that runs.
func openError(err error) error {
	msg := sqlcore.OneLine(err)
	if strings.Contains(msg, "Could not set lock on file") {
		return sqlcore.Flat("the file is open in another process: "+msg, warehouse.ErrBusy, err)
	}
	return sqlcore.Flat(msg, err)
}

// User returns "": DuckDB has no database users (its current_user is the
// constant "duckdb"), so there is nothing meaningful to record.
func (a *adapter) User(context.Context) string { return "" }

// Close releases the database file if a session is still open.
func (a *adapter) Close() error {
	return (*Warehouse)(a).closeSession()
}

func (a *adapter) Exec(ctx context.Context, query string, args ...any) (int64, error) {
	conn, err := (*Warehouse)(a).session(ctx)
	if err != nil {
		return 0, err
	}
	res, err := conn.ExecContext(ctx, query, args...)
	if err != nil {
		return 0, err
	}
	n, _ := res.RowsAffected()
	return n, nil
}

func (a *adapter) Query(ctx context.Context, query string, args ...any) (sqlcore.Rows, error) {
	conn, err := (*Warehouse)(a).session(ctx)
	if err != nil {
		return nil, err
	}
	rows, err := conn.QueryContext(ctx, query, args...)
	if err != nil {
		return nil, err
	}
	return listRows{rows}, nil
}

// listRows scans a DuckDB LIST of DOUBLE into *[]float64 (NULL: NaN).
type listRows struct{ *sql.Rows }

func (r listRows) Close() { r.Rows.Close() }

func (r listRows) Scan(dest ...any) error {
	for i, d := range dest {
		if l, ok := d.(*[]float64); ok {
			dest[i] = floatList{l}
		}
	}
	return r.Rows.Scan(dest...)
}

type floatList struct{ out *[]float64 }

func (f floatList) Scan(v any) error {
	l, ok := v.([]any)
	if !ok {
		return fmt.Errorf("unexpected aggregate result %T", v)
	}
	*f.out = make([]float64, len(l))
	for i, e := range l {
		x, ok := e.(float64)
		if !ok && e != nil {
			return fmt.Errorf("unexpected aggregate element %T", e)
		} else if !ok {
			x = math.NaN()
		}
		(*f.out)[i] = x
	}
	return nil
}

// ScaleMemoryPerThread, ScaleMemoryFloor and ScaleMemoryPerUnit set the
// DuckDB memory_limit of a warehouse-scale run: max(ScaleMemoryFloor,
// threads × ScaleMemoryPerThread, units × ScaleMemoryPerUnit) bytes.
// DuckDB runs in this process, so its buffer pool is the tool's resident
// memory: by default it may grow to 80 % of the machine's RAM and keeps
// the pages it has read, which made a warehouse-scale run (3.6 GB at 2
// million units × 20 covariates) larger than the in-memory one (2.3 GB).
// Under a limit the scans stream from the file, joins and sorts spill,
// and large INSERT … SELECT statements write as they go; every query
// completed at 2 million units with 128 MB on 2 threads. The per-unit
// share keeps room for the publish step's joins, which cannot all spill
// (at 10,000,000 units a flat 128 MB ran out of memory in the balance
// sums).
const (
	ScaleMemoryPerThread = 64 << 20
	ScaleMemoryFloor     = 128 << 20
	ScaleMemoryPerUnit   = 96
)

var _ warehouse.ScaleTuner = (*Warehouse)(nil)

// TuneForScale implements warehouse.ScaleTuner: SET memory_limit (see
// ScaleMemoryPerThread) for every session from now on; the setting is
// global to the database instance, which each session opens for itself.
func (w *Warehouse) TuneForScale(ctx context.Context, units int) error {
	return w.with(ctx, false, func() error {
		var threads int64
		if err := w.conn.QueryRowContext(ctx, "SELECT CAST(current_setting('threads') AS BIGINT)").Scan(&threads); err != nil {
			return fmt.Errorf("read threads setting: %w", dialect.Err(err))
		}
		w.memLimit = max(int64(ScaleMemoryFloor), threads*ScaleMemoryPerThread, int64(units)*ScaleMemoryPerUnit)
		return w.setMemory(ctx)
	})
}

// setMemory applies memLimit to the open session.
func (w *Warehouse) setMemory(ctx context.Context) error {
	if w.memLimit <= 0 {
		return nil
	}
	if _, err := w.conn.ExecContext(ctx, fmt.Sprintf("SET memory_limit = '%dMB'", w.memLimit>>20)); err != nil {
		return fmt.Errorf("set memory_limit: %w", dialect.Err(err))
	}
	return nil
}

// queryError classes an error DuckDB raised for the analyst's query: parse,
// bind, catalog, conversion and similar errors are the study's fault and
// wrap warehouse.ErrBadInput; I/O, memory, interrupts and internal errors
// are runtime errors.
func queryError(err error) error {
	var de *duckdb.Error
	if errors.As(err, &de) {
		switch de.Type {
		case duckdb.ErrorTypeParser, duckdb.ErrorTypeSyntax, duckdb.ErrorTypeBinder,
			duckdb.ErrorTypeCatalog, duckdb.ErrorTypeConversion, duckdb.ErrorTypeOutOfRange,
			duckdb.ErrorTypeInvalidInput, duckdb.ErrorTypeMismatchType, duckdb.ErrorTypeInvalidType,
			duckdb.ErrorTypeDivideByZero, duckdb.ErrorTypeDecimal, duckdb.ErrorTypeExpression,
			duckdb.ErrorTypePlanner, duckdb.ErrorTypeParameterNotResolved,
			duckdb.ErrorTypeParameterNotAllowed, duckdb.ErrorTypeNotImplemented,
			duckdb.ErrorTypeTransaction, duckdb.ErrorTypePermission,
			duckdb.ErrorTypeMissingExtension, duckdb.ErrorTypeAutoLoad:
			return sqlcore.Flat("bad input: "+sqlcore.OneLine(err), warehouse.ErrBadInput, err)
		}
	}
	return sqlcore.Flat(sqlcore.OneLine(err), err)
}

// Lock takes the study's lock on a sidecar file next to the database
// (filelock.Study). DuckDB's own file lock already keeps other processes
// out while this one has the database open read-write; the sidecar lock
// holds per study, and also against tools that open the file in turn.
func (a *adapter) Lock(_ context.Context, out warehouse.Output) (func() error, error) {
	return filelock.Study(a.path, out)
}
