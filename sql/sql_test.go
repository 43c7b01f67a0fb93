package sqltext

import (
	"io/fs"
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
