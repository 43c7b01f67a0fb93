package sqlcore

import (
	"context"
	"fmt"

	"counterpart/warehouse"
)

// preflight checks, before a run reads anything, what publishing will
// need: the output schema exists, and the session may create a table
// there, insert into it and drop it. The engine's Privileges check names
// a missing right; then a probe table is created, filled and dropped in a
// transaction that is always rolled back, which covers whatever the
// engine cannot report (a read-only attached database, a policy). Every
// failure wraps ErrBadInput: it is the study's or the grants' to fix.
func (c *Core) preflight(ctx context.Context, out warehouse.Output) error {
	var n int64
	if _, err := c.QueryRow(ctx, c.Render("schema_exists.sql", nil), []any{out.Schema}, &n); err != nil {
		return fmt.Errorf("pre-flight: look up schema %s: %w", out.Schema, err)
	}
	if n == 0 {
		return fmt.Errorf("pre-flight: %w: output.schema %s does not exist %s; create it (CREATE SCHEMA %s) or name an existing one",
			warehouse.ErrBadInput, out.Schema, c.Place, out.Schema)
	}
	if c.D.Privileges != nil {
		if err := c.D.Privileges(ctx, c, out); err != nil {
			return err
		}
	}
	probe := warehouse.QuoteQualified(out.Schema, out.Prefix+"runs_probe")
	if _, err := c.Exec(ctx, "pre-flight: begin", "BEGIN TRANSACTION"); err != nil {
		return err
	}
	defer c.Rollback(ctx)
	for _, stmt := range []string{"CREATE TABLE " + probe + " (run_id " + c.D.Types[warehouse.TypeText] + ")",
		"INSERT INTO " + probe + " VALUES ('probe')", "DROP TABLE " + probe} {
		if _, err := c.A.Exec(ctx, stmt); err != nil {
			return fmt.Errorf("pre-flight: %w: cannot create, fill and drop a table in output.schema %s %s (%s); grant those rights or name another schema",
				warehouse.ErrBadInput, out.Schema, c.Place, OneLine(c.err(err)))
		}
	}
	return nil
}
