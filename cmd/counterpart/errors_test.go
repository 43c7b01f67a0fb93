package main

import (
	"bytes"
	"context"
	"database/sql"
	"os"
	"path/filepath"
	"strings"
	"testing"

	_ "github.com/duckdb/duckdb-go/v2"
)

// TestErrorStepsNamedOnce: an error that passes through the warehouse and
// the command names each step once, so the one stderr line never reads
// "list runs: list runs: …".
func TestErrorStepsNamedOnce(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"counterpart", "demo", "--dir", dir, "--units", "1500"}, &out, &errb); code != exitOK {
		t.Fatalf("demo exit %d: %s", code, errb.String())
	}
	// A runs table of the wrong shape makes every read of the run history
	// fail inside the engine.
	db, err := sql.Open("duckdb", filepath.Join(dir, "warehouse.duckdb"))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Exec(`create schema broken; create table broken.hf_coaching_runs (run_id integer)`); err != nil {
		t.Fatal(err)
	}
	db.Close()
	spec, err := os.ReadFile(filepath.Join(dir, "hf_coaching.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	broken := filepath.Join(dir, "broken.yaml")
	if err := os.WriteFile(broken, []byte(strings.Replace(string(spec), "schema: main", "schema: broken", 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name string
		args []string
	}{
		{"runs", []string{"runs", "--study", broken}},
		{"runs show", []string{"runs", "show", "--study", broken}},
		{"runs diff", []string{"runs", "diff", "--study", broken, "a", "b"}},
		{"report", []string{"report", "--study", broken, "--out", filepath.Join(dir, "r.html")}},
		{"report into a missing directory", []string{"report", "--study", filepath.Join(dir, "hf_coaching.yaml"), "latest", "--out", filepath.Join(dir, "nosuchdir", "r.html")}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var o, e bytes.Buffer
			code := run(ctx, append([]string{"counterpart"}, tc.args...), &o, &e)
			line := strings.TrimSpace(e.String())
			t.Logf("exit %d: %s", code, line)
			if code == exitOK || strings.Count(line, "\n") != 0 {
				t.Fatalf("exit %d, want one error line: %q", code, line)
			}
			seg := strings.Split(line, ": ")
			for i := 1; i < len(seg); i++ {
				if seg[i] == seg[i-1] {
					t.Errorf("step %q named twice: %s", seg[i], line)
				}
			}
		})
	}
}
