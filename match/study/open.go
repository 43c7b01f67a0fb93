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
	w, err := warehouse.Open(ctx, s.Warehouse.Engine, s.Warehouse.DSN, warehouse.OpenOptions{ReadOnly: readOnly, Study: s.Study})
	if err != nil {
		return nil, fmt.Errorf("open warehouse: %w", err)
	}
	return w, nil
}
