// Package pgtest gives tests a scratch Postgres database. It connects to
// the server named by COUNTERPART_PG_DSN (default
// postgres://postgres@127.0.0.1:5432/postgres?sslmode=disable, then the
// same as user root), creates a database with a unique name per call and
// drops it when the test ends. When no server answers, tests skip with one
// line saying how to run them — except under CI=true, where they fail.
//
// It is for tests only: it must not be imported by the tool itself.
package pgtest

import (
	"context"
	"fmt"
	"net/url"
	"os"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
)

// DefaultDSN is the server tried when COUNTERPART_PG_DSN is unset.
const DefaultDSN = "postgres://postgres@127.0.0.1:5432/postgres?sslmode=disable"

var (
	adminOnce sync.Once
	adminDSN  string
	adminErr  error
	seq       atomic.Int64
)

// candidates lists the admin connection strings to try, in order.
func candidates() []string {
	if dsn := os.Getenv("COUNTERPART_PG_DSN"); dsn != "" {
		return []string{dsn}
	}
	return []string{DefaultDSN, strings.Replace(DefaultDSN, "//postgres@", "//root@", 1)}
}

// Admin returns a connection string of the server's maintenance database
// for a role that may create databases, or skips (fails under CI=true)
// when no server can be reached.
func Admin(t testing.TB) string {
	t.Helper()
	adminOnce.Do(func() {
		for _, dsn := range candidates() {
			ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
			conn, err := pgx.Connect(ctx, dsn)
			cancel()
			if err == nil {
				conn.Close(context.Background())
				adminDSN, adminErr = dsn, nil
				return
			}
			adminErr = err
		}
	})
	if adminErr != nil {
		where := strings.Join(candidates(), " or ")
		if os.Getenv("CI") == "true" {
			t.Fatalf("postgres: no server at %s (%v); CI=true requires one — .ci/run starts the installed cluster, or set COUNTERPART_PG_DSN", where, adminErr)
		}
		t.Skipf("postgres tests skipped: no server at %s; start Postgres on 127.0.0.1:5432 (trust auth) or set COUNTERPART_PG_DSN, then go test ./...", where)
	}
	return adminDSN
}

// WithDatabase returns dsn pointing at database name instead.
func WithDatabase(dsn, name string) string {
	if u, err := url.Parse(dsn); err == nil && (u.Scheme == "postgres" || u.Scheme == "postgresql") {
		u.Path = "/" + name
		return u.String()
	}
	// key=value: a later key overrides an earlier one.
	return dsn + " dbname=" + name
}

// NewDatabase creates an empty database with a unique name and returns its
// connection string; the database is dropped (with its sessions) when the
// test ends.
func NewDatabase(t testing.TB) string {
	t.Helper()
	admin := Admin(t)
	name := fmt.Sprintf("counterpart_test_%d_%d_%d", os.Getpid(), time.Now().UnixNano()%1e9, seq.Add(1))
	Exec(t, admin, "CREATE DATABASE "+name)
	// A runaway test query must not outlive its test and block the
	// scratch database's cleanup: cap every statement in it.
	Exec(t, admin, "ALTER DATABASE "+name+" SET statement_timeout = '5min'")
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		conn, err := pgx.Connect(ctx, admin)
		if err != nil {
			t.Errorf("drop scratch database %s: %v", name, err)
			return
		}
		defer conn.Close(ctx)
		if _, err := conn.Exec(ctx, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)"); err != nil {
			t.Errorf("drop scratch database %s: %v", name, err)
		}
	})
	return WithDatabase(admin, name)
}

// Exec runs statements (simple protocol: several may be given) on a new
// connection to dsn.
func Exec(t testing.TB, dsn, sql string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		t.Fatalf("connect: %v", err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, sql); err != nil {
		t.Fatalf("%.200s: %v", sql, err)
	}
}

// Query runs a read query on a new connection to dsn and returns every
// row with pgx's default Go values; NULL is nil.
func Query(t testing.TB, dsn, sql string) [][]any {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		t.Fatalf("connect: %v", err)
	}
	defer conn.Close(ctx)
	rows, err := conn.Query(ctx, sql)
	if err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
	var out [][]any
	for rows.Next() {
		v, err := rows.Values()
		if err != nil {
			t.Fatalf("%s: %v", sql, err)
		}
		out = append(out, v)
	}
	if err := rows.Err(); err != nil {
		t.Fatalf("%s: %v", sql, err)
	}
	return out
}
