package postgres

import (
	"context"
	"embed"
	"errors"
	"fmt"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgconn/ctxwatch"

	"counterpart/warehouse"
	"counterpart/warehouse/sqlcore"
)

//go:embed sql/*.sql
var sqlFiles embed.FS

func init() {
	sqlcore.Register(warehouse.Engine{
		Name: "postgres", DefaultSchema: "public", DSNHint: "a postgres:// URL",
		Open: func(ctx context.Context, dsn string, o warehouse.OpenOptions) (warehouse.Warehouse, error) {
			return open(ctx, dsn, o)
		},
	}, sqlFiles)
}

// Warehouse is one connection to a Postgres database. It is not safe for
// concurrent use: one run owns it, and all its statements (and its
// advisory lock) live on that one session.
type Warehouse struct {
	*sqlcore.Core
	conn *pgx.Conn
	cfg  *pgx.ConnConfig
	// secrets are strings that must never appear in an error message: the
	// password of the connection string, however it was given.
	secrets []string
}

// adapter is the Warehouse as sqlcore sees it.
type adapter Warehouse

// pgTypes is the Postgres type of each contract column type, spelt as
// format_type reports it (table_columns.sql). JSON columns are jsonb:
// stored parsed, queryable with the JSON operators.
var pgTypes = map[warehouse.ColType]string{
	warehouse.TypeText: "text", warehouse.TypeBigInt: "bigint", warehouse.TypeDouble: "double precision",
	warehouse.TypeBool: "boolean", warehouse.TypeTimestampTZ: "timestamp with time zone", warehouse.TypeJSON: "jsonb",
}

func (w *Warehouse) dialect() *sqlcore.Dialect {
	a := (*adapter)(w)
	return &sqlcore.Dialect{
		Name: "postgres", Types: pgTypes, Inlines: true, Partitions: true,
		// hashtext is the hash of Postgres's text hash indexes; it is
		// stable within a major version, which is all a seed needs.
		SampleKeep: func(unit string, modulus int) string {
			return fmt.Sprintf("mod(abs(CAST(hashtext(CAST(%s AS text)) AS bigint)), %d) = 0", unit, modulus)
		},
		Err:         a.dbErr,
		QueryErr:    a.queryError,
		Scrub:       func(s string) string { return sqlcore.Scrub(s, w.secrets) },
		StatusCheck: statusCheck,
		// A current view filters its table on run_id; with keep_runs
		// runs retained a heap scan reads them all. The index is
		// created once, in the publishing transaction (a first run
		// killed there leaves none behind), and takes a SHARE lock,
		// which readers do not wait for.
		RunIndex: func(schema, table string) string {
			return "CREATE INDEX IF NOT EXISTS " + warehouse.Quote(table+"_run_id") + " ON " + warehouse.QuoteQualified(schema, table) + " (run_id)"
		},
		// Retention drops a run's partitions instead of deleting its
		// rows (sqlcore/partition.go).
		RunPartitions: true,
		Privileges:    privileges,
	}
}

// privileges checks the schema's USAGE and CREATE rights and, on the
// contract's tables that exist already, INSERT and DELETE (publish and
// retention) and the ownership of the partitioned ones, naming the first
// right missing and the GRANT that gives it.
func privileges(ctx context.Context, c *sqlcore.Core, out warehouse.Output) error {
	var what, object string
	found, err := c.QueryRow(ctx, c.Render("privileges.sql", nil), []any{out.Schema, out.Prefix}, &what, &object)
	if err != nil {
		return fmt.Errorf("pre-flight: privileges in schema %s: %w", out.Schema, err)
	}
	if !found {
		return nil
	}
	user := c.User(ctx)
	if what == "USAGE" || what == "CREATE" {
		return fmt.Errorf("pre-flight: %w: role %s lacks %s on output.schema %s; GRANT %s ON SCHEMA %s TO %s, or name another schema",
			warehouse.ErrBadInput, user, what, out.Schema, what, warehouse.Quote(out.Schema), user)
	}
	if what == "OWNERSHIP" {
		// A run attaches and drops partitions of its run tables
		// (sqlcore/partition.go), which only the owner may do.
		return fmt.Errorf("pre-flight: %w: role %s does not own the partitioned table %s.%s, which publishing needs (a run adds and drops its partitions); ALTER TABLE %s OWNER TO %s, or GRANT the owner's role to %s",
			warehouse.ErrBadInput, user, out.Schema, object, warehouse.QuoteQualified(out.Schema, object), user, user)
	}
	return fmt.Errorf("pre-flight: %w: role %s lacks %s on table %s.%s; GRANT %s ON %s TO %s",
		warehouse.ErrBadInput, user, what, out.Schema, object, what, warehouse.QuoteQualified(out.Schema, object), user)
}

// statusCheck drops and adds again, under its name and in the open
// transaction, a runs table's status check from before the abandoned or
// cancelled status (the newest status tells an up-to-date check).
func statusCheck(ctx context.Context, c *sqlcore.Core, o *warehouse.Objects) error {
	var name, def string
	found, err := c.QueryRow(ctx, c.Render("status_check.sql", nil), []any{o.C.Schema, o.C.Runs.Name}, &name, &def)
	if err != nil {
		return fmt.Errorf("status check of %s: %w", o.C.Runs.Name, err)
	}
	if !found || strings.Contains(def, warehouse.StatusCancelled) {
		return nil
	}
	q := fmt.Sprintf("ALTER TABLE %s DROP CONSTRAINT %s, ADD CONSTRAINT %s %s", o.Runs, warehouse.Quote(name), warehouse.Quote(name), sqlcore.StatusCheckExpr())
	_, err = c.Exec(ctx, "update the status check of "+o.C.Runs.Name, q)
	return err
}

// Open connects for a run. dsn is a libpq connection string (URL or
// key=value); what it leaves out comes from the libpq environment variables
// (PGHOST, PGPORT, PGUSER, PGPASSWORD, PGDATABASE, PGSSLMODE, ...) and the
// password file (~/.pgpass or PGPASSFILE), as pgconn.ParseConfig does. An
// error never contains the password.
func Open(ctx context.Context, dsn string) (*Warehouse, error) {
	return open(ctx, dsn, warehouse.OpenOptions{})
}

// OpenReadOnly connects for a dry run: the session's
// default_transaction_read_only is on, so nothing done through it can
// write, and the write methods refuse to start.
func OpenReadOnly(ctx context.Context, dsn string) (*Warehouse, error) {
	return open(ctx, dsn, warehouse.OpenOptions{ReadOnly: true})
}

// open connects with o. A study named in o names the session:
// application_name becomes "counterpart <study>", so that
// pg_stat_activity (and a refused second run) shows which study a
// session runs.
func open(ctx context.Context, dsn string, o warehouse.OpenOptions) (*Warehouse, error) {
	secrets := sqlcore.DSNSecrets(dsn)
	cfg, err := pgx.ParseConfig(dsn)
	if err != nil {
		// pgconn redacts what it recognises; scrub again with what we found.
		return nil, fmt.Errorf("postgres: %w: warehouse.dsn is not a valid connection string: %s",
			warehouse.ErrBadInput, sqlcore.Scrub(err.Error(), secrets))
	}
	if cfg.Password != "" {
		secrets = append(secrets, cfg.Password)
	}
	app := "counterpart"
	if o.Study != "" {
		app += " " + o.Study
	}
	cfg.RuntimeParams["application_name"] = app
	if o.ReadOnly {
		cfg.RuntimeParams["default_transaction_read_only"] = "on"
	}
	// Warehouse-scale passes are single aggregate queries with hundreds of
	// sums over long per-row expressions; the planner rates them
	// expensive enough to JIT-compile, and LLVM then spends minutes (and
	// gigabytes) compiling, without answering a cancel request, what runs
	// in seconds interpreted. Our session does without it, unless the
	// DSN sets jit itself.
	if _, set := cfg.RuntimeParams["jit"]; !set {
		cfg.RuntimeParams["jit"] = "off"
	}
	// A cancelled context sends the server a cancel request and keeps the
	// session (and its advisory lock) usable; the deadline is the fallback
	// when the server does not answer.
	cfg.BuildContextWatcherHandler = func(pc *pgconn.PgConn) ctxwatch.Handler {
		return &pgconn.CancelRequestContextWatcherHandler{Conn: pc, DeadlineDelay: 5 * time.Second}
	}
	// Statements are described anew each time: the cohort query is run once
	// and counterpart's own statements are few.
	cfg.DefaultQueryExecMode = pgx.QueryExecModeDescribeExec
	conn, err := pgx.ConnectConfig(ctx, cfg)
	if err != nil {
		return nil, fmt.Errorf("postgres %s: %w", describe(cfg), sqlcore.Flat(sqlcore.Scrub(sqlcore.OneLine(err), secrets), err))
	}
	w := &Warehouse{conn: conn, cfg: cfg, secrets: secrets}
	w.Core = &sqlcore.Core{A: (*adapter)(w), D: w.dialect(), Place: "in database " + cfg.Database, ReadOnly: o.ReadOnly}
	return w, nil
}

// describe names the server and database for messages, never the password.
func describe(cfg *pgx.ConnConfig) string {
	return fmt.Sprintf("(user %s, database %s on %s:%d)", cfg.User, cfg.Database, cfg.Host, cfg.Port)
}

// User returns current_user, for lineage.
func (w *adapter) User(ctx context.Context) string {
	var u string
	if err := w.conn.QueryRow(ctx, "SELECT current_user").Scan(&u); err != nil {
		return w.cfg.User
	}
	return u
}

// Close ends the session, which also releases its advisory locks.
func (w *adapter) Close() error {
	if err := w.conn.Close(context.Background()); err != nil {
		return fmt.Errorf("close postgres: %w", w.dbErr(err))
	}
	return nil
}

func (w *adapter) Exec(ctx context.Context, query string, args ...any) (int64, error) {
	tag, err := w.conn.Exec(ctx, query, args...)
	return tag.RowsAffected(), err
}

func (w *adapter) Query(ctx context.Context, query string, args ...any) (sqlcore.Rows, error) {
	return w.conn.Query(ctx, query, args...)
}

// pgMessage is a server error in one line with its detail and hint.
func pgMessage(err error) string {
	var pe *pgconn.PgError
	if !errors.As(err, &pe) {
		return sqlcore.OneLine(err)
	}
	msg := pe.Message
	if pe.Detail != "" {
		msg += " (" + pe.Detail + ")"
	}
	if pe.Hint != "" {
		msg += "; hint: " + pe.Hint
	}
	if pe.Position > 0 {
		msg += fmt.Sprintf(" at character %d", pe.Position)
	}
	return strings.Join(strings.Fields(msg), " ") + " (SQLSTATE " + pe.Code + ")"
}

// dbErr flattens an error of counterpart's own statements. Those are never
// the analyst's fault by themselves: where the study is at fault (a missing
// schema, a type conflict) the caller checks first and says so.
func (w *adapter) dbErr(err error) error {
	return sqlcore.Flat(sqlcore.Scrub(pgMessage(err), w.secrets), err)
}

// badInputClasses are the SQLSTATE classes (PostgreSQL manual, Appendix A)
// of errors in the analyst's query: 0A feature not supported, 21
// cardinality violation, 22 data exception, 25 invalid transaction state
// (25006: a write in the read-only transaction), 2B/2F/38/39 routine
// errors, 42 syntax error or access rule violation (unknown table or
// column, permission denied), 44 WITH CHECK OPTION. Everything else
// (connection, resources, cancellation, internal) is a runtime error.
var badInputClasses = map[string]bool{"0A": true, "21": true, "22": true, "25": true, "2B": true,
	"2F": true, "38": true, "39": true, "42": true, "44": true, "P0": true}

// queryError classes an error the server raised for the analyst's query.
func (w *adapter) queryError(err error) error {
	var pe *pgconn.PgError
	if errors.As(err, &pe) && len(pe.Code) == 5 {
		msg := sqlcore.Scrub(pgMessage(err), w.secrets)
		switch {
		case pe.Code == "25006":
			return sqlcore.Flat("the query writes ("+msg+"); the cohort query must be a single SELECT that only reads — move writes to your ETL",
				warehouse.ErrBadInput, err)
		case pe.Code == "42601" && strings.Contains(pe.Message, "multiple commands"):
			return sqlcore.Flat("cohort.sql holds more than one statement; write a single SELECT", warehouse.ErrBadInput, err)
		case badInputClasses[pe.Code[:2]]:
			return sqlcore.Flat(msg, warehouse.ErrBadInput, err)
		}
	}
	return w.dbErr(err)
}
