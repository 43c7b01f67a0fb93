package duckdb

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
)

// dialect names this engine's folder of SQL text under sql/.
const dialect = "duckdb"

// Warehouse is an open DuckDB database file. It is not safe for concurrent
// use: one run owns it, and all its statements run on one connection.
type Warehouse struct {
	path     string
	readOnly bool
	db       *sql.DB
	conn     *sql.Conn

	// fault, when set by a test, is called at each step of Publish; a
	// non-nil return fails the publish there (checks the rollback).
	fault func(step string) error
	// bulk is the table function bulk writes go through (nil read-only).
	bulk *bulk
}

var _ warehouse.Warehouse = (*Warehouse)(nil)

// Open opens (creating when absent) the DuckDB database file named by dsn
// for a run. The dsn is a file path, optionally followed by DuckDB settings
// (path?threads=4). The directory must exist. A file another process holds
// open gives an error wrapping warehouse.ErrLocked.
func Open(ctx context.Context, dsn string) (*Warehouse, error) {
	path, _, _ := strings.Cut(dsn, "?")
	if path == "" || path == ":memory:" {
		return nil, fmt.Errorf("open duckdb: %w: warehouse.dsn %q is not a file path; give the path of a DuckDB file", warehouse.ErrBadInput, dsn)
	}
	dir := filepath.Dir(path)
	if st, err := os.Stat(dir); err != nil || !st.IsDir() {
		return nil, fmt.Errorf("open duckdb: %w: directory %s of warehouse.dsn does not exist; create it or fix the path", warehouse.ErrBadInput, dir)
	}
	return open(ctx, path, dsn, false)
}

// OpenReadOnly opens an existing DuckDB file with access_mode READ_ONLY, for
// dry runs: nothing done through it can write, and other read-only
// processes may share the file. A missing file is an error.
func OpenReadOnly(ctx context.Context, dsn string) (*Warehouse, error) {
	path, params, hasParams := strings.Cut(dsn, "?")
	st, err := os.Stat(path)
	if err != nil || st.IsDir() {
		return nil, fmt.Errorf("open duckdb read-only: %w: warehouse.dsn %s is not an existing DuckDB file", warehouse.ErrBadInput, path)
	}
	if hasParams && params != "" {
		dsn = path + "?" + params + "&access_mode=READ_ONLY"
	} else {
		dsn = path + "?access_mode=READ_ONLY"
	}
	return open(ctx, path, dsn, true)
}

func open(ctx context.Context, path, dsn string, readOnly bool) (*Warehouse, error) {
	db, err := sql.Open("duckdb", dsn)
	if err != nil {
		return nil, fmt.Errorf("open duckdb %s: %w", path, openError(err))
	}
	conn, err := db.Conn(ctx)
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("open duckdb %s: %w", path, openError(err))
	}
	w := &Warehouse{path: path, readOnly: readOnly, db: db, conn: conn}
	if !readOnly {
		if err := registerBulk(ctx, w); err != nil {
			conn.Close()
			db.Close()
			return nil, fmt.Errorf("open duckdb %s: register bulk writer: %w", path, err)
		}
	}
	return w, nil
}

// openError maps DuckDB's own file lock (another process has the file open
// for writing) to warehouse.ErrLocked.
func openError(err error) error {
	msg := oneLine(err)
	if strings.Contains(msg, "Could not set lock on file") {
		return &dbError{"the file is open in another process: " + msg, []error{warehouse.ErrLocked, err}}
	}
	return &dbError{msg, []error{err}}
}

// Engine returns "duckdb".
func (w *Warehouse) Engine() string { return "duckdb" }

// User returns "": DuckDB has no database users (its current_user is the
// constant "duckdb"), so there is nothing meaningful to record.
func (w *Warehouse) User(ctx context.Context) string { return "" }

// Close releases the connection and the database file.
func (w *Warehouse) Close() error {
	err := w.conn.Close()
	if e := w.db.Close(); err == nil {
		err = e
	}
	if err != nil {
		return fmt.Errorf("close duckdb %s: %w", w.path, err)
	}
	return nil
}

// exec runs statements on the dedicated connection.
func (w *Warehouse) exec(ctx context.Context, query string, args ...any) (sql.Result, error) {
	return w.conn.ExecContext(ctx, query, args...)
}

// rollback ends any open transaction. It ignores the context's
// cancellation: a cancelled run must still release its transaction.
func (w *Warehouse) rollback(ctx context.Context) {
	_, _ = w.conn.ExecContext(context.WithoutCancel(ctx), "ROLLBACK")
}

// oneLine flattens a DuckDB error message to one line: DuckDB appends the
// query text and a caret on lines of their own ("LINE 1: ..."), which carry
// no information once the query is named and break single-line logs.
func oneLine(err error) string {
	var parts []string
	for _, l := range strings.Split(err.Error(), "\n") {
		l = strings.TrimSpace(l)
		if l == "" || strings.HasPrefix(l, "LINE ") || strings.Trim(l, "^ ") == "" {
			continue
		}
		parts = append(parts, l)
	}
	return strings.Join(parts, " ")
}

// queryError classes an error DuckDB raised for the analyst's query: parse,
// bind, catalog, conversion and similar errors are the study's fault and
// wrap warehouse.ErrBadInput; I/O, memory, interrupts and internal errors
// are runtime errors.
func queryError(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
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
			return &dbError{"bad input: " + oneLine(err), []error{warehouse.ErrBadInput, err}}
		}
	}
	return &dbError{oneLine(err), []error{err}}
}

// dbErr flattens an error of counterpart's own statements (DDL, publish,
// runs rows). Those are never the analyst's fault by themselves: where the
// study is at fault (a missing schema, a type conflict) the caller checks
// first and says so.
func dbErr(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	return &dbError{oneLine(err), []error{err}}
}

// dbError carries a DuckDB error flattened to one line while keeping the
// original (and the error class) for errors.Is and errors.As.
type dbError struct {
	msg  string
	errs []error
}

func (e *dbError) Error() string   { return e.msg }
func (e *dbError) Unwrap() []error { return e.errs }
