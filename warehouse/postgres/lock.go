package postgres

import (
	"context"
	"errors"
	"fmt"
	"hash/fnv"
	"time"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse"
)

// lockKey is the advisory lock key of a study: the 64-bit FNV-1a hash of
// "counterpart", the schema and the study, NUL-separated so that no two
// (schema, study) pairs give the same text. A collision with another
// application's key would only make a run wait for nothing (it is refused
// with the holder named), never let two runs of one study in.
func lockKey(schema, study string) int64 {
	h := fnv.New64a()
	h.Write([]byte("counterpart\x00" + schema + "\x00" + study))
	return int64(h.Sum64())
}

// Lock takes the study's session-level advisory lock with
// pg_try_advisory_lock on the run's connection. It is held for the life of
// that session: released by the returned function, by Close, or by the
// server when the process dies and its connection drops, so a crashed run
// never leaves a stale lock. A lock held elsewhere gives an error wrapping
// warehouse.ErrLocked that names the holder's pid, application_name and
// client address from pg_locks and pg_stat_activity. Lock also sets
// application_name to "counterpart <study>".
func (w *adapter) Lock(ctx context.Context, out warehouse.Output) (func() error, error) {
	if _, err := w.conn.Exec(ctx, "SELECT pg_catalog.set_config('application_name', $1, false)", "counterpart "+out.Study); err != nil {
		return nil, fmt.Errorf("set application_name: %w", w.dbErr(err))
	}
	key := lockKey(out.Schema, out.Study)
	var got bool
	if err := w.conn.QueryRow(ctx, "SELECT pg_catalog.pg_try_advisory_lock($1)", key).Scan(&got); err != nil {
		return nil, fmt.Errorf("advisory lock: %w", w.dbErr(err))
	}
	if !got {
		return nil, warehouse.LockedError(out, w.holder(ctx, key))
	}
	return func() error {
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		var ok bool
		if err := w.conn.QueryRow(ctx, "SELECT pg_catalog.pg_advisory_unlock($1)", key).Scan(&ok); err != nil {
			return fmt.Errorf("unlock study %s: %w", out.Study, w.dbErr(err))
		}
		if !ok {
			return fmt.Errorf("unlock study %s: the session did not hold its lock", out.Study)
		}
		return nil
	}, nil
}

// holder describes the session holding key, best effort: the holder may
// have finished in between, and a role without pg_read_all_stats sees
// other users' sessions without their details.
func (w *adapter) holder(ctx context.Context, key int64) string {
	u := uint64(key)
	var pid int32
	var app, addr, since string
	err := w.conn.QueryRow(ctx, w.Render("lock_holder.sql", nil), uint32(u>>32), uint32(u)).Scan(&pid, &app, &addr, &since)
	switch {
	case errors.Is(err, pgx.ErrNoRows):
		return "another session (it has just ended; try again)"
	case err != nil:
		return "another session (" + w.dbErr(err).Error() + ")"
	}
	s := fmt.Sprintf("pid %d", pid)
	if app != "" {
		s += fmt.Sprintf(" (application_name %q)", app)
	}
	s += " from " + addr
	if since != "" {
		s += " connected since " + since
	}
	return s
}
