package duckdb

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"fmt"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
)

// LoadColumn is one column of a table LoadTable writes. Values is a
// []int64, []float64, []string or []bool of the table's length.
type LoadColumn struct {
	Name    string
	Type    string // BIGINT, INTEGER, DOUBLE, VARCHAR or BOOLEAN
	Comment string
	Values  any
}

// LoadTable creates (or replaces) schema.table in the DuckDB file at path
// and fills it. It exists for the synthetic demo warehouse and for tests;
// analysis runs never call it.
func LoadTable(ctx context.Context, path, schema, table, comment string, cols []LoadColumn) error {
	for _, id := range []string{schema, table} {
		if err := warehouse.ValidIdent(id); err != nil {
			return fmt.Errorf("load table: %w", err)
		}
	}
	db, err := sql.Open("duckdb", path)
	if err != nil {
		return fmt.Errorf("load table: open %s: %w", path, err)
	}
	defer db.Close()
	conn, err := db.Conn(ctx)
	if err != nil {
		return fmt.Errorf("load table: %w", err)
	}
	defer conn.Close()
	ddl := fmt.Sprintf("CREATE SCHEMA IF NOT EXISTS %s; CREATE OR REPLACE TABLE %s.%s (", warehouse.Quote(schema), warehouse.Quote(schema), warehouse.Quote(table))
	n := -1
	for i, c := range cols {
		if err := warehouse.ValidIdent(c.Name); err != nil {
			return fmt.Errorf("load table: %w", err)
		}
		if i > 0 {
			ddl += ", "
		}
		ddl += warehouse.Quote(c.Name) + " " + c.Type
		var l int
		switch v := c.Values.(type) {
		case []int64:
			l = len(v)
		case []float64:
			l = len(v)
		case []string:
			l = len(v)
		case []bool:
			l = len(v)
		default:
			return fmt.Errorf("load table: column %s: unsupported values %T", c.Name, c.Values)
		}
		if n >= 0 && l != n {
			return fmt.Errorf("load table: column %s has %d values, want %d", c.Name, l, n)
		}
		n = l
	}
	ddl += ")"
	if _, err := conn.ExecContext(ctx, ddl); err != nil {
		return fmt.Errorf("load table: create: %w", err)
	}
	if comment != "" {
		if _, err := conn.ExecContext(ctx, fmt.Sprintf("COMMENT ON TABLE %s.%s IS %s", warehouse.Quote(schema), warehouse.Quote(table), demoLiteral(comment))); err != nil {
			return fmt.Errorf("load table: comment: %w", err)
		}
	}
	for _, c := range cols {
		if c.Comment == "" {
			continue
		}
		if _, err := conn.ExecContext(ctx, fmt.Sprintf("COMMENT ON COLUMN %s.%s.%s IS %s", warehouse.Quote(schema), warehouse.Quote(table), warehouse.Quote(c.Name), demoLiteral(c.Comment))); err != nil {
			return fmt.Errorf("load table: comment: %w", err)
		}
	}
	return conn.Raw(func(dc any) error {
		app, err := duckdb.NewAppenderFromConn(dc.(driver.Conn), schema, table)
		if err != nil {
			return fmt.Errorf("load table: appender: %w", err)
		}
		row := make([]driver.Value, len(cols))
		for i := 0; i < n; i++ {
			for j, c := range cols {
				switch v := c.Values.(type) {
				case []int64:
					if c.Type == "INTEGER" {
						row[j] = int32(v[i])
					} else {
						row[j] = v[i]
					}
				case []float64:
					row[j] = v[i]
				case []string:
					row[j] = v[i]
				case []bool:
					row[j] = v[i]
				}
			}
			if err := app.AppendRow(row...); err != nil {
				app.Close()
				return fmt.Errorf("load table: row %d: %w", i, err)
			}
		}
		if err := app.Close(); err != nil {
			return fmt.Errorf("load table: flush: %w", err)
		}
		return nil
	})
}

// demoLiteral quotes a SQL string literal.
func demoLiteral(s string) string {
	out := []byte{'\''}
	for i := 0; i < len(s); i++ {
		if s[i] == '\'' {
			out = append(out, '\'')
		}
		out = append(out, s[i])
	}
	return string(append(out, '\''))
}
