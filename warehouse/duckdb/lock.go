package duckdb

import (
	"context"
	"errors"
	"fmt"
	"os"
	"strings"
	"time"

	"counterpart/warehouse"
)

// errHeld is what lockFile returns when another holder has the lock.
var errHeld = errors.New("lock held")

// Lock takes the per-study lock on the sidecar file
// <db file>.<schema>.<study>.lock, in which the holder writes its pid,
// host and start time so that a refused run can say who holds it. On Unix
// the lock is an exclusive, non-blocking flock(2): it is released by the
// returned function or when the process dies (the kernel drops the flocks
// of closed files), so a crashed run never leaves a stale lock; the file
// itself stays. DuckDB's own file lock already keeps other processes out
// while this one has the database open read-write; the sidecar lock holds
// per study rather than per file, and also against tools that open the
// file one after another.
func (a *adapter) Lock(ctx context.Context, out warehouse.Output) (func() error, error) {
	path := a.path + "." + out.Schema + "." + out.Study + ".lock"
	host, _ := os.Hostname()
	info := fmt.Sprintf("pid %d on %s since %s\n", os.Getpid(), host, time.Now().UTC().Format(time.RFC3339))
	release, err := lockFile(path, info)
	if errors.Is(err, errHeld) {
		holder, _ := os.ReadFile(path)
		h := strings.TrimSpace(string(holder))
		if h == "" {
			h = "another process"
		}
		return nil, fmt.Errorf("%w: study %s in schema %s is locked by %s (lock file %s); wait for that run to finish",
			warehouse.ErrLocked, out.Study, out.Schema, h, path)
	}
	if err != nil {
		return nil, fmt.Errorf("lock file %s: %w", path, err)
	}
	return func() error {
		if err := release(); err != nil {
			return fmt.Errorf("unlock %s: %w", path, err)
		}
		return nil
	}, nil
}
