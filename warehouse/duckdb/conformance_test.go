package duckdb

import (
	"context"
	"path/filepath"
	"testing"

	"counterpart/warehouse"
	"counterpart/warehouse/warehousetest"
)

// openTemp opens a new DuckDB file in the test's temporary directory.
func openTemp(t *testing.T) *Warehouse {
	t.Helper()
	w, err := Open(context.Background(), filepath.Join(t.TempDir(), "w.duckdb"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { w.Close() })
	return w
}

// queryRows runs a query on w's dedicated connection and returns all rows.
func queryRows(t *testing.T, w *Warehouse, query string) [][]any {
	t.Helper()
	rows, err := w.conn.QueryContext(context.Background(), query)
	if err != nil {
		t.Fatalf("%s: %v", query, err)
	}
	return warehousetest.SQLRows(t, rows)
}

func execSQL(t *testing.T, w *Warehouse, query string) {
	t.Helper()
	if _, err := w.conn.ExecContext(context.Background(), query); err != nil {
		t.Fatalf("%s: %v", query, err)
	}
}

// engine adapts this package to the conformance suite.
var engine = warehousetest.Engine{
	Schema: "main",
	Open:   func(t *testing.T) warehouse.Warehouse { return openTemp(t) },
	Exec: func(t *testing.T, w warehouse.Warehouse, query string) {
		execSQL(t, w.(*Warehouse), query)
	},
	Query: func(t *testing.T, w warehouse.Warehouse, query string) [][]any {
		return queryRows(t, w.(*Warehouse), query)
	},
	// flock conflicts between two open files even in one process, so the
	// same handle stands for another session.
	Other:      func(t *testing.T, w warehouse.Warehouse) warehouse.Warehouse { return w },
	Fault:      func(w warehouse.Warehouse, f func(string) error) { w.(*Warehouse).Fault = f },
	FaultSteps: []string{"runs", "cohort", "scores", "matches", "weights", "effects", "retention", "views", "commit"},
}

func TestConformance(t *testing.T) {
	warehousetest.RunConformance(t, engine)
}
