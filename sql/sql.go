// Package sqltext holds the SQL text counterpart runs against a warehouse:
// DDL of the output contract, the current and balance views, retention and
// the runs-table statements. The files live under sql/common (dialect-neutral)
// and each engine's own folder (warehouse/<engine>/sql, registered with
// RegisterDialect); a dialect file overrides a common file of the same name.
//
// Files are text/template templates. They receive identifiers already
// validated and quoted by the engine (warehouse.ValidIdent, warehouse.Quote)
// and never see user values: values are bound parameters ($1, $2, ...), and
// the only literals are the names of covariates and schemes, which are
// validated identifiers, quoted with the lit function.
//
// The package must not open connections or know about engines' drivers: it
// returns text.
package sqltext

import (
	"embed"
	"fmt"
	"io/fs"
	"strings"
	"sync"
	"text/template"
)

//go:embed common/*.sql
var files embed.FS

var dialects sync.Map // dialect name → fs.FS of its *.sql files

// RegisterDialect adds an engine's own SQL files (an fs.FS whose root
// holds them), embedded from the engine's folder; it is called from the
// engine's init.
func RegisterDialect(dialect string, files fs.FS) { dialects.Store(dialect, files) }

// FS returns the embedded common SQL files, common/*.sql.
func FS() fs.FS { return files }

// Text returns the file name (for example "current_view.sql") for dialect:
// the dialect's own file when it has one, otherwise common/name.
func Text(dialect, name string) (string, error) {
	var b []byte
	err := fs.ErrNotExist
	if d, ok := dialects.Load(dialect); ok {
		b, err = fs.ReadFile(d.(fs.FS), name)
	}
	if err != nil {
		b, err = fs.ReadFile(files, "common/"+name)
	}
	if err != nil {
		return "", fmt.Errorf("sql text %s for %s: not found", name, dialect)
	}
	return string(b), nil
}

var cache sync.Map // dialect/name → *template.Template

// Render executes the template name for dialect with data. Besides the
// text/template built-ins, templates may call lit, which quotes a string
// literal (Literal).
func Render(dialect, name string, data any) (string, error) {
	key := dialect + "/" + name
	t, ok := cache.Load(key)
	if !ok {
		text, err := Text(dialect, name)
		if err != nil {
			return "", err
		}
		parsed, err := template.New(name).Option("missingkey=error").
			Funcs(template.FuncMap{"lit": Literal}).Parse(text)
		if err != nil {
			return "", fmt.Errorf("sql text %s: %w", key, err)
		}
		t, _ = cache.LoadOrStore(key, parsed)
	}
	var b strings.Builder
	if err := t.(*template.Template).Execute(&b, data); err != nil {
		return "", fmt.Errorf("sql text %s: %w", key, err)
	}
	return b.String(), nil
}

// Literal returns s as a SQL string literal: in single quotes, with every
// single quote doubled (SQL:2016 part 2, 5.3 <character string literal>; the
// same in DuckDB and in Postgres with standard_conforming_strings on, the
// default since 9.1).
func Literal(s string) string {
	return "'" + strings.ReplaceAll(s, "'", "''") + "'"
}
