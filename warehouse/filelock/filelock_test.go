package filelock

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"counterpart/warehouse"
)

// TestStudy: a held lock refuses a second holder with ErrLocked, naming
// the holder and the lock file; released, it can be taken again; another
// study of the same file has a lock of its own.
func TestStudy(t *testing.T) {
	db := filepath.Join(t.TempDir(), "w.duckdb")
	out := warehouse.Output{Schema: "main", Study: "hf"}
	release, err := Study(db, out)
	if err != nil {
		t.Fatal(err)
	}
	_, err = Study(db, out)
	if !errors.Is(err, warehouse.ErrLocked) || !strings.Contains(err.Error(), fmt.Sprintf("pid %d on ", os.Getpid())) ||
		!strings.Contains(err.Error(), db+".main.hf.lock") {
		t.Fatalf("second lock: %v", err)
	}
	other, err := Study(db, warehouse.Output{Schema: "main", Study: "other"})
	if err != nil {
		t.Fatalf("lock of another study: %v", err)
	}
	if err := other(); err != nil {
		t.Fatal(err)
	}
	if err := release(); err != nil {
		t.Fatal(err)
	}
	again, err := Study(db, out)
	if err != nil {
		t.Fatalf("lock after release: %v", err)
	}
	if err := again(); err != nil {
		t.Fatal(err)
	}
}
