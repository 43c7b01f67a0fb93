package sqlcore

import (
	"context"
	"fmt"
	"strings"

	sqltext "counterpart/sql"
	"counterpart/warehouse"
)

var _ warehouse.Loader = (*Core)(nil)

// LoadTable implements warehouse.Loader with standard DDL and the
// adapter's Bulk (without a run id), so every engine loads the same way.
func (c *Core) LoadTable(ctx context.Context, schema, table, comment string, cols []warehouse.LoadColumn) error {
	if err := c.writable(); err != nil {
		return fmt.Errorf("load table: %w", err)
	}
	for _, id := range []string{schema, table} {
		if err := warehouse.ValidIdent(id); err != nil {
			return fmt.Errorf("load table: %w", err)
		}
	}
	qt := warehouse.QuoteQualified(schema, table)
	var defs, comments []string
	if comment != "" {
		comments = append(comments, "COMMENT ON TABLE "+qt+" IS "+sqltext.Literal(comment))
	}
	bulk := make([]BulkCol, len(cols))
	n := 0
	for i, col := range cols {
		if err := warehouse.ValidIdent(col.Name); err != nil {
			return fmt.Errorf("load table: %w", err)
		}
		defs = append(defs, warehouse.Quote(col.Name)+" "+col.Type)
		if col.Comment != "" {
			comments = append(comments, "COMMENT ON COLUMN "+qt+"."+warehouse.Quote(col.Name)+" IS "+sqltext.Literal(col.Comment))
		}
		b, l := BulkCol{Name: col.Name}, 0
		switch v := col.Values.(type) {
		case []int64:
			b.I64, l = v, len(v)
		case []float64:
			b.F64, l = v, len(v)
		case []string:
			b.S, l = v, len(v)
		case []bool:
			b.B, l = v, len(v)
		default:
			return fmt.Errorf("load table: column %s: unsupported values %T", col.Name, col.Values)
		}
		if i > 0 && l != n {
			return fmt.Errorf("load table: column %s has %d values, want %d", col.Name, l, n)
		}
		bulk[i], n = b, l
	}
	stmts := append([]string{"CREATE SCHEMA IF NOT EXISTS " + warehouse.Quote(schema), "DROP TABLE IF EXISTS " + qt,
		"CREATE TABLE " + qt + " (" + strings.Join(defs, ", ") + ")"}, comments...)
	err := c.tx(ctx, func() error {
		for _, s := range stmts {
			w := strings.Fields(s)
			if _, err := c.Exec(ctx, strings.ToLower(w[0]+" "+w[1]), s); err != nil {
				return err
			}
		}
		if err := c.A.Bulk(ctx, qt, "", bulk, n); err != nil {
			return fmt.Errorf("bulk write: %w", c.err(err))
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("load table %s: %w", qt, err)
	}
	return nil
}
