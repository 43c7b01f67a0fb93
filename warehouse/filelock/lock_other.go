//go:build !unix

package filelock

import (
	"errors"
	"os"
)

// lockFile, without flock, creates path exclusively and removes it on
// release. A crashed run leaves the file behind; the error then names the
// holder recorded in it, and deleting the file releases the lock.
func lockFile(path, info string) (release func() error, err error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE|os.O_EXCL, 0o644)
	if errors.Is(err, os.ErrExist) {
		return nil, errHeld
	}
	if err != nil {
		return nil, err
	}
	_, werr := f.WriteString(info)
	if cerr := f.Close(); werr == nil {
		werr = cerr
	}
	if werr != nil {
		os.Remove(path)
		return nil, werr
	}
	return func() error { return os.Remove(path) }, nil
}
