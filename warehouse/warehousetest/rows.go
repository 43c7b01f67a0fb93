package warehousetest

import (
	"database/sql"
	"testing"
)

// SQLRows reads every row of a database/sql result as the driver's Go
// values (NULL is nil) and closes it: the Query of engines whose test
// connection speaks database/sql.
func SQLRows(t testing.TB, rows *sql.Rows) [][]any {
	t.Helper()
	defer rows.Close()
	cols, err := rows.Columns()
	if err != nil {
		t.Fatal(err)
	}
	var out [][]any
	for rows.Next() {
		vals := make([]any, len(cols))
		ptrs := make([]any, len(cols))
		for i := range vals {
			ptrs[i] = &vals[i]
		}
		if err := rows.Scan(ptrs...); err != nil {
			t.Fatal(err)
		}
		out = append(out, vals)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return out
}
