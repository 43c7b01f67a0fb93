package warehouse

import "fmt"

// LockedError is the error of a lock another run of out's study holds,
// worded the same on every engine; holder says who, as precisely as the
// engine can tell.
func LockedError(out Output, holder string) error {
	return fmt.Errorf("%w: study %s in schema %s is locked by %s; wait for that run to finish",
		ErrLocked, out.Study, out.Schema, holder)
}
