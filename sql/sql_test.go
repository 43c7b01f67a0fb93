package sqltext

import (
	"io/fs"
	"strings"
	"testing"
	"text/template"
)

// TestTemplatesParse: every embedded file is a valid template.
func TestTemplatesParse(t *testing.T) {
	n := 0
	err := fs.WalkDir(FS(), ".", func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := fs.ReadFile(FS(), path)
		if err != nil {
			return err
		}
		if _, err := template.New(path).Funcs(template.FuncMap{"lit": Literal}).Parse(string(b)); err != nil {
			t.Errorf("%s: %v", path, err)
		}
		n++
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n < 10 {
		t.Errorf("only %d files embedded", n)
	}
}

func TestTextLookup(t *testing.T) {
	// A dialect file is found in its folder, a common file through any
	// dialect, and a missing file is an error.
	if s, err := Text("duckdb", "table_columns.sql"); err != nil || !strings.Contains(s, "duckdb_columns()") {
		t.Errorf("duckdb/table_columns.sql: %v", err)
	}
	if s, err := Text("duckdb", "current_view.sql"); err != nil || !strings.Contains(s, "CREATE OR REPLACE VIEW") {
		t.Errorf("common/current_view.sql through duckdb: %v", err)
	}
	if s, err := Text("postgres", "table_columns.sql"); err != nil || !strings.Contains(s, "pg_attribute") {
		t.Errorf("postgres/table_columns.sql: %v", err)
	}
	if _, err := Text("duckdb", "lock_holder.sql"); err == nil {
		t.Error("found a Postgres-only file for duckdb")
	}
	if _, err := Render("duckdb", "no_such.sql", nil); err == nil {
		t.Error("rendered a missing file")
	}
}

func TestRender(t *testing.T) {
	got, err := Render("duckdb", "current_view.sql", map[string]string{
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
	if _, err := Render("duckdb", "current_view.sql", map[string]string{"View": "v"}); err == nil {
		t.Error("rendered with missing fields")
	}
}

func TestLiteral(t *testing.T) {
	// SQL:2016 part 2, 5.3: a quote inside a literal is written twice.
	tests := []struct{ in, want string }{
		{"", "''"},
		{"abc", "'abc'"},
		{"it's", "'it''s'"},
		{"''", "''''''"},
		{`back\slash`, `'back\slash'`},
	}
	for _, tt := range tests {
		if got := Literal(tt.in); got != tt.want {
			t.Errorf("Literal(%q) = %s, want %s", tt.in, got, tt.want)
		}
	}
}
