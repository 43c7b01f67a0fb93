package duckdb

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strings"
	"syscall"
	"time"

	"counterpart/warehouse"
)

// Lock takes the per-study lock: an exclusive, non-blocking flock(2) on the
// sidecar file <db file>.<schema>.<study>.lock, in which the holder writes
// its pid, host and start time so that a refused run can say who holds it.
// The lock is released by the returned function or when the process dies
// (the kernel drops flocks of closed files), so a crashed run never leaves
// a stale lock; the file itself stays. DuckDB's own file lock already keeps
// other processes out while this one has the database open read-write; the
// sidecar lock also covers studies run against the file one after another
// by cooperating tools, and holds per study rather than per file.
func (w *Warehouse) Lock(ctx context.Context, out warehouse.Output) (func() error, error) {
	for what, id := range map[string]string{"output.schema": out.Schema, "study": out.Study} {
		if err := warehouse.ValidIdent(id); err != nil {
			return nil, fmt.Errorf("lock: %s: %w", what, err)
		}
	}
	path := w.path + "." + out.Schema + "." + out.Study + ".lock"
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("lock %s: %w", path, err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		holder, _ := os.ReadFile(path)
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			h := strings.TrimSpace(string(holder))
			if h == "" {
				h = "unknown holder"
			}
			return nil, fmt.Errorf("%w: study %s in schema %s is locked by %s (lock file %s); wait for that run to finish",
				warehouse.ErrLocked, out.Study, out.Schema, h, path)
		}
		return nil, fmt.Errorf("lock %s: %w", path, err)
	}
	host, _ := os.Hostname()
	info := fmt.Sprintf("pid %d on %s since %s\n", os.Getpid(), host, time.Now().UTC().Format(time.RFC3339))
	if err := f.Truncate(0); err == nil {
		_, _ = f.WriteAt([]byte(info), 0)
	}
	released := false
	return func() error {
		if released {
			return nil
		}
		released = true
		// Clear the holder first so that nobody reads a stale name.
		_ = f.Truncate(0)
		err := syscall.Flock(int(f.Fd()), syscall.LOCK_UN)
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			return fmt.Errorf("unlock %s: %w", path, err)
		}
		return nil
	}, nil
}
