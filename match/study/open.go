package study

import (
	"context"
	"fmt"

	"counterpart/warehouse"
	"counterpart/warehouse/duckdb"
	"counterpart/warehouse/postgres"
)

// Open connects to the study's warehouse. A dry run opens read-only where
// the engine allows it, so a mistake in the study cannot write.
func Open(ctx context.Context, s *Spec, readOnly bool) (warehouse.Warehouse, error) {
	switch s.Warehouse.Engine {
	case "duckdb":
		if readOnly {
			w, err := duckdb.OpenReadOnly(ctx, s.Warehouse.DSN)
			if err != nil {
				return nil, fmt.Errorf("open warehouse: %w", err)
			}
			return w, nil
		}
		w, err := duckdb.Open(ctx, s.Warehouse.DSN)
		if err != nil {
			return nil, fmt.Errorf("open warehouse: %w", err)
		}
		return w, nil
	case "postgres":
		open := postgres.Open
		if readOnly {
			open = postgres.OpenReadOnly
		}
		w, err := open(ctx, s.Warehouse.DSN, postgres.WithStudy(s.Study))
		if err != nil {
			return nil, fmt.Errorf("open warehouse: %w", err)
		}
		return w, nil
	default:
		return nil, fmt.Errorf("open warehouse: %w: warehouse.engine %q is not available in this build; use duckdb or postgres", warehouse.ErrBadInput, s.Warehouse.Engine)
	}
}
