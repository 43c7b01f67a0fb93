package sqlcore

import (
	"context"
	"fmt"
	"strings"

	"counterpart/warehouse"
)

// ReadCohort runs q.SQL inside a read-only transaction (always rolled
// back), after the engine's CheckSelect, and decodes the rows with the
// shared Collector following the rules on warehouse.CohortQuery.
func (c *Core) ReadCohort(ctx context.Context, q warehouse.CohortQuery) (*warehouse.Cohort, error) {
	var k *Collector
	err := c.readOnly(ctx, q, func() error {
		return c.A.Stream(ctx, q.SQL, func(cols []Column) ([]Sink, error) {
			var err error
			if k, err = NewCollector(q, cols); err != nil {
				return nil, err
			}
			return k.Sinks(), nil
		})
	})
	if err != nil {
		return nil, err
	}
	return k.Finish()
}

// readOnly runs fn inside a read-only transaction (rolled back) after
// checking that q.SQL is a single SELECT.
func (c *Core) readOnly(ctx context.Context, q warehouse.CohortQuery, fn func() error) error {
	if err := warehouse.CheckRoles(q); err != nil {
		return err
	}
	if strings.TrimSpace(strings.Trim(q.SQL, "; \t\r\n")) == "" {
		return fmt.Errorf("%w: cohort.sql is empty; write a SELECT that returns one row per unit", warehouse.ErrBadInput)
	}
	if _, err := c.Exec(ctx, "begin read-only transaction", "BEGIN TRANSACTION READ ONLY"); err != nil {
		return err
	}
	defer c.Rollback(ctx)
	if err := c.A.CheckSelect(ctx, q.SQL); err != nil {
		return err
	}
	return fn()
}

// FirstKeyword returns the first word of an SQL text in upper case,
// skipping blanks and comments (and opening brackets when parens);
// "(" when the text starts with one, "" when there is no word.
func FirstKeyword(text string, parens bool) string {
	s, blank := text, " \t\r\n\f"
	if parens {
		blank += "("
	}
	for {
		s = strings.TrimLeft(s, blank)
		end := ""
		switch {
		case strings.HasPrefix(s, "--"):
			end = "\n"
		case strings.HasPrefix(s, "/*"):
			end = "*/"
		case strings.HasPrefix(s, "("):
			return "("
		}
		if end == "" {
			break
		}
		i := strings.Index(s, end)
		if i < 0 {
			return ""
		}
		s = s[i+len(end):]
	}
	end := strings.IndexFunc(s, func(r rune) bool {
		return !(r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r == '_')
	})
	if end < 0 {
		end = len(s)
	}
	return strings.ToUpper(s[:end])
}
