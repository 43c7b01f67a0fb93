package postgres

import (
	"context"
	"errors"
	"fmt"
	"net/url"
	"regexp"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgconn/ctxwatch"

	"counterpart/warehouse"
)

// dialect names this engine's folder of SQL text under sql/.
const dialect = "postgres"

// Warehouse is one connection to a Postgres database. It is not safe for
// concurrent use: one run owns it, and all its statements (and its
// advisory lock) live on that one session.
type Warehouse struct {
	conn     *pgx.Conn
	cfg      *pgx.ConnConfig
	readOnly bool
	// secrets are strings that must never appear in an error message: the
	// password of the connection string, however it was given.
	secrets []string

	// fault, when set by a test, is called at each step of Publish; a
	// non-nil return fails the publish there (checks the rollback).
	fault func(step string) error
}

var _ warehouse.Warehouse = (*Warehouse)(nil)

// Option adjusts how Open connects.
type Option func(*options)

type options struct{ study string }

// WithStudy names the study on the connection: application_name becomes
// "counterpart <study>", so that pg_stat_activity (and a refused second
// run) shows which study a session runs.
func WithStudy(study string) Option { return func(o *options) { o.study = study } }

// Open connects for a run. dsn is a libpq connection string (URL or
// key=value); what it leaves out comes from the libpq environment variables
// (PGHOST, PGPORT, PGUSER, PGPASSWORD, PGDATABASE, PGSSLMODE, ...) and the
// password file (~/.pgpass or PGPASSFILE), as pgconn.ParseConfig does. An
// error never contains the password.
func Open(ctx context.Context, dsn string, opts ...Option) (*Warehouse, error) {
	return open(ctx, dsn, false, opts)
}

// OpenReadOnly connects for a dry run: the session's
// default_transaction_read_only is on, so nothing done through it can
// write, and the write methods refuse to start.
func OpenReadOnly(ctx context.Context, dsn string, opts ...Option) (*Warehouse, error) {
	return open(ctx, dsn, true, opts)
}

func open(ctx context.Context, dsn string, readOnly bool, opts []Option) (*Warehouse, error) {
	var o options
	for _, f := range opts {
		f(&o)
	}
	secrets := dsnSecrets(dsn)
	cfg, err := pgx.ParseConfig(dsn)
	if err != nil {
		// pgconn redacts what it recognises; scrub again with what we found.
		return nil, fmt.Errorf("open postgres: %w: warehouse.dsn is not a valid connection string: %s",
			warehouse.ErrBadInput, scrub(err.Error(), secrets))
	}
	if cfg.Password != "" {
		secrets = append(secrets, cfg.Password)
	}
	app := "counterpart"
	if o.study != "" {
		app += " " + o.study
	}
	cfg.RuntimeParams["application_name"] = app
	if readOnly {
		cfg.RuntimeParams["default_transaction_read_only"] = "on"
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
		return nil, fmt.Errorf("open postgres %s: %w", describe(cfg), &scrubbed{scrub(oneLine(err), secrets), err})
	}
	return &Warehouse{conn: conn, cfg: cfg, readOnly: readOnly, secrets: secrets}, nil
}

// describe names the server and database for messages, never the password.
func describe(cfg *pgx.ConnConfig) string {
	return fmt.Sprintf("(user %s, database %s on %s:%d)", cfg.User, cfg.Database, cfg.Host, cfg.Port)
}

// Engine returns "postgres".
func (w *Warehouse) Engine() string { return "postgres" }

// User returns current_user, for lineage.
func (w *Warehouse) User(ctx context.Context) string {
	var u string
	if err := w.conn.QueryRow(ctx, "SELECT current_user").Scan(&u); err != nil {
		return w.cfg.User
	}
	return u
}

// Close ends the session, which also releases its advisory locks.
func (w *Warehouse) Close() error {
	if err := w.conn.Close(context.Background()); err != nil {
		return fmt.Errorf("close postgres: %w", w.dbErr(err))
	}
	return nil
}

// rollback ends any open transaction, ignoring the context's
// cancellation: a cancelled run must still release its transaction.
func (w *Warehouse) rollback(ctx context.Context) {
	ctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
	defer cancel()
	_, _ = w.conn.Exec(ctx, "ROLLBACK")
}

// dsnSecrets finds the password a connection string carries (URL user
// info, a password query parameter, or a key=value password) before
// parsing, so that even an unparsable string cannot leak it.
func dsnSecrets(dsn string) []string {
	var out []string
	if u, err := url.Parse(dsn); err == nil && u.User != nil {
		if p, ok := u.User.Password(); ok && p != "" {
			out = append(out, p, url.QueryEscape(p), url.PathEscape(p))
		}
		for k, vs := range u.Query() {
			if strings.EqualFold(k, "password") {
				out = append(out, vs...)
			}
		}
	} else if i := strings.Index(dsn, "://"); i >= 0 {
		// A URL that does not parse: take what lies between user: and @.
		rest := dsn[i+3:]
		if at := strings.LastIndex(rest, "@"); at >= 0 {
			if c := strings.Index(rest[:at], ":"); c >= 0 && c+1 < at {
				out = append(out, rest[c+1:at])
			}
		}
	}
	for _, m := range kvPassword.FindAllStringSubmatch(dsn, -1) {
		out = append(out, strings.Trim(m[2], "'"), m[2])
	}
	return out
}

var (
	kvPassword  = regexp.MustCompile(`(?i)(password\s*=\s*)('[^']*'|[^\s&]+)`)
	urlPassword = regexp.MustCompile(`(://[^:/@\s]*:)[^@\s]*@`)
)

// scrub removes every known secret and any URL or key=value password from
// msg.
func scrub(msg string, secrets []string) string {
	for _, s := range secrets {
		if len(s) > 0 {
			msg = strings.ReplaceAll(msg, s, "xxxxx")
		}
	}
	msg = urlPassword.ReplaceAllString(msg, "${1}xxxxx@")
	return kvPassword.ReplaceAllString(msg, "${1}xxxxx")
}

// scrubbed is an error whose message was scrubbed of secrets; the original
// stays reachable for errors.As (a *pgconn.PgError, say) but Error never
// shows it.
type scrubbed struct {
	msg string
	err error
}

func (e *scrubbed) Error() string { return e.msg }
func (e *scrubbed) Unwrap() error { return e.err }

// oneLine flattens a message to one line: server errors may carry DETAIL
// and HINT lines, pgconn's connect errors a tab-indented list.
func oneLine(err error) string {
	var parts []string
	for _, l := range strings.Split(err.Error(), "\n") {
		if l = strings.TrimSpace(l); l != "" {
			parts = append(parts, l)
		}
	}
	return strings.Join(parts, " ")
}

// pgMessage is a server error in one line with its detail and hint.
func pgMessage(err error) string {
	var pe *pgconn.PgError
	if !errors.As(err, &pe) {
		return oneLine(err)
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
func (w *Warehouse) dbErr(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	return &dbError{scrub(pgMessage(err), w.secrets), []error{err}}
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
func (w *Warehouse) queryError(err error) error {
	if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
		return err
	}
	var pe *pgconn.PgError
	if errors.As(err, &pe) && len(pe.Code) == 5 {
		msg := scrub(pgMessage(err), w.secrets)
		switch {
		case pe.Code == "25006":
			return &dbError{"the query writes (" + msg + "); the cohort query must be a single SELECT that only reads — move writes to your ETL",
				[]error{warehouse.ErrBadInput, err}}
		case pe.Code == "42601" && strings.Contains(pe.Message, "multiple commands"):
			return &dbError{"cohort.sql holds more than one statement; write a single SELECT",
				[]error{warehouse.ErrBadInput, err}}
		case badInputClasses[pe.Code[:2]]:
			return &dbError{msg, []error{warehouse.ErrBadInput, err}}
		}
	}
	return w.dbErr(err)
}

// dbError carries a server error flattened to one line while keeping the
// original (and the error class) for errors.Is and errors.As.
type dbError struct {
	msg  string
	errs []error
}

func (e *dbError) Error() string   { return e.msg }
func (e *dbError) Unwrap() []error { return e.errs }
