package warehousetest

import (
	"context"
	"database/sql"
	"testing"

	"counterpart/warehouse"
)

// SQLRows runs query on db (a *sql.DB or *sql.Conn) and reads every row
// as the driver's Go values (NULL is nil): the Query of engines whose
// test connection speaks database/sql.
func SQLRows(t testing.TB, db interface {
	QueryContext(ctx context.Context, query string, args ...any) (*sql.Rows, error)
}, query string) [][]any {
	t.Helper()
	rows, err := db.QueryContext(context.Background(), query)
	if err != nil {
		t.Fatalf("%s: %v", query, err)
	}
	out, err := ScanAll(rows)
	if err != nil {
		t.Fatalf("%s: %v", query, err)
	}
	return out
}

// ScanAll reads every row of rows as the driver's Go values (NULL is nil)
// and closes rows.
func ScanAll(rows *sql.Rows) ([][]any, error) {
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		return nil, err
	}
	var out [][]any
	for rows.Next() {
		vals := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for i := range vals {
			ptrs[i] = &vals[i]
		}
		if err := rows.Scan(ptrs...); err != nil {
			return nil, err
		}
		out = append(out, vals)
	}
	return out, rows.Err()
}

// Keep returns w for a test after Open gave it (failing the test on err)
// and closes it when the test ends.
func Keep[W warehouse.Warehouse](t testing.TB, w W, err error) W {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { w.Close() })
	return w
}
