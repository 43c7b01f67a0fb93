//go:build unix

package filelock

import (
	"errors"
	"os"
	"syscall"
)

// lockFile takes an exclusive flock on path (creating the file) and writes
// info into it. flock locks belong to the open file, so a second lockFile
// on the same path fails even within one process.
func lockFile(path, info string) (release func() error, err error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, err
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, errHeld
		}
		return nil, err
	}
	if err := f.Truncate(0); err == nil {
		_, _ = f.WriteAt([]byte(info), 0)
	}
	return func() error {
		// Clear the holder first so that nobody reads a stale name.
		_ = f.Truncate(0)
		err := syscall.Flock(int(f.Fd()), syscall.LOCK_UN)
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		return err
	}, nil
}
