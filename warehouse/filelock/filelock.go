// Package filelock is the per-study lock of engines whose database is a
// file (DuckDB): an exclusive lock on a sidecar file beside it, in which
// the holder writes its pid, host and start time so that a refused run
// can say who holds it.
//
// It must not touch the database file itself, and it must never wait: a
// lock held elsewhere is an error wrapping warehouse.ErrLocked at once.
package filelock

import (
	"errors"
	"fmt"
	"os"
	"strings"
	"time"

	"counterpart/warehouse"
)

// errHeld is what lockFile returns when another holder has the lock.
var errHeld = errors.New("lock held")

// Study takes the lock of out's study on <db>.<schema>.<study>.lock. On
// Unix the lock is an exclusive, non-blocking flock(2): it is released by
// the returned function or when the process dies (the kernel drops the
// flocks of closed files), so a crashed run never leaves a stale lock;
// the file itself stays. The lock holds per study rather than per
// database file, and also against tools that open the file one after
// another. The caller validates out.Schema and out.Study as identifiers,
// so neither can name a path.
func Study(db string, out warehouse.Output) (release func() error, err error) {
	path := db + "." + out.Schema + "." + out.Study + ".lock"
	host, _ := os.Hostname()
	info := fmt.Sprintf("pid %d on %s since %s\n", os.Getpid(), host, time.Now().UTC().Format(time.RFC3339))
	unlock, err := lockFile(path, info)
	if errors.Is(err, errHeld) {
		holder, _ := os.ReadFile(path)
		h := strings.TrimSpace(string(holder))
		if h == "" {
			h = "another process"
		}
		return nil, warehouse.LockedError(out, h+" (lock file "+path+")")
	}
	if err != nil {
		return nil, fmt.Errorf("lock file %s: %w", path, err)
	}
	return func() error {
		if err := unlock(); err != nil {
			return fmt.Errorf("unlock %s: %w", path, err)
		}
		return nil
	}, nil
}
