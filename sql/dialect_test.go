package sqltext_test

import (
	"strings"
	"testing"

	sqltext "counterpart/sql"
	_ "counterpart/warehouse/engines" // the engines register their dialect SQL
)

func TestTextLookup(t *testing.T) {
	// A dialect file is found in its folder, a common file through any
	// dialect, and a missing file is an error.
	if s, err := sqltext.Text("duckdb", "table_columns.sql"); err != nil || !strings.Contains(s, "duckdb_columns()") {
		t.Errorf("duckdb/table_columns.sql: %v", err)
	}
	if s, err := sqltext.Text("duckdb", "current_view.sql"); err != nil || !strings.Contains(s, "CREATE OR REPLACE VIEW") {
		t.Errorf("common/current_view.sql through duckdb: %v", err)
	}
	if s, err := sqltext.Text("postgres", "table_columns.sql"); err != nil || !strings.Contains(s, "pg_attribute") {
		t.Errorf("postgres/table_columns.sql: %v", err)
	}
	if _, err := sqltext.Text("duckdb", "lock_holder.sql"); err == nil {
		t.Error("found a Postgres-only file for duckdb")
	}
	if _, err := sqltext.Render("duckdb", "no_such.sql", nil); err == nil {
		t.Error("rendered a missing file")
	}
}

func TestRender(t *testing.T) {
	got, err := sqltext.Render("duckdb", "current_view.sql", map[string]string{
		"View": `"main"."v"`, "Table": `"main"."t"`, "Runs": `"main"."r"`, "Comment": "it's current",
	})
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`CREATE OR REPLACE VIEW "main"."v" AS`, `FROM "main"."t"`, `FROM "main"."r"`, `IS 'it''s current';`} {
		if !strings.Contains(got, want) {
			t.Errorf("rendered view lacks %q:\n%s", want, got)
		}
	}
	// A field the template needs but the data lacks is an error, not an
	// empty string in SQL.
	if _, err := sqltext.Render("duckdb", "current_view.sql", map[string]string{"View": "v"}); err == nil {
		t.Error("rendered with missing fields")
	}
}
