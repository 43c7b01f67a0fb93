package study

import (
	"context"
	"fmt"

	"counterpart/warehouse"
	_ "counterpart/warehouse/engines" // the engines register themselves
)

// Open connects to the study's warehouse through the engine registry. A
// dry run opens read-only where the engine allows it, so a mistake in the
// study cannot write.
func Open(ctx context.Context, s *Spec, readOnly bool) (warehouse.Warehouse, error) {
	return OpenWith(ctx, s, warehouse.OpenOptions{ReadOnly: readOnly})
}

// OpenWith is Open with the caller's open options (how long to wait for a
// busy warehouse); the study fills in its name and external access.
func OpenWith(ctx context.Context, s *Spec, o warehouse.OpenOptions) (warehouse.Warehouse, error) {
	o.Study, o.NoExternalAccess = s.Study, s.Warehouse.NoExternalAccess()
	w, err := warehouse.Open(ctx, s.Warehouse.Engine, s.Warehouse.DSN, o)
	if err != nil {
		return nil, fmt.Errorf("open warehouse: %w", err)
	}
	return w, nil
}
