package postgres

import (
	"context"
	"testing"

	"github.com/jackc/pgx/v5/pgtype"

	"counterpart/warehouse"
	"counterpart/warehouse/postgres/pgtest"
	"counterpart/warehouse/warehousetest"
)

// openScratch opens a warehouse on a new scratch database (dropped when
// the test ends).
func openScratch(t testing.TB) *Warehouse {
	t.Helper()
	return openDSN(t, pgtest.NewDatabase(t))
}

func openDSN(t testing.TB, dsn string) *Warehouse {
	t.Helper()
	w, err := Open(context.Background(), dsn)
	return warehousetest.Keep(t, w, err)
}

// queryRows runs a query on w's connection and returns all rows; numeric
// values come back as float64 so that the suite can compare them.
func queryRows(t testing.TB, w warehouse.Warehouse, query string) [][]any {
	t.Helper()
	rows, err := w.(*Warehouse).conn.Query(context.Background(), query)
	if err != nil {
		t.Fatalf("%s: %v", query, err)
	}
	defer rows.Close()
	var out [][]any
	for rows.Next() {
		vals, err := rows.Values()
		if err != nil {
			t.Fatal(err)
		}
		for i, v := range vals {
			if n, ok := v.(pgtype.Numeric); ok {
				f, err := n.Float64Value()
				if err != nil {
					t.Fatal(err)
				}
				vals[i] = f.Float64
			}
		}
		out = append(out, vals)
	}
	if err := rows.Err(); err != nil {
		t.Fatalf("%s: %v", query, err)
	}
	return out
}

var execSQL = warehousetest.Exec

// engine adapts this package to the conformance suite. Each Open is a new
// database, so the suite's unqualified names resolve in its public schema.
// The advisory lock belongs to the session: another session is another
// connection to the same database.
var engine = warehousetest.Engine{
	Schema: "public", Query: queryRows,
	Open: func(t *testing.T) warehouse.Warehouse { return openScratch(t) },
	Other: func(t *testing.T, w warehouse.Warehouse) warehouse.Warehouse {
		return openDSN(t, w.(*Warehouse).cfg.ConnString())
	},
}

func TestConformance(t *testing.T) {
	warehousetest.RunConformance(t, engine)
}

func TestUpgradeRunsTable(t *testing.T) {
	warehousetest.UpgradeRunsTable(t, engine)
}
