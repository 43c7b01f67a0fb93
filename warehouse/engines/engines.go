// Package engines links every engine of this build into the registry
// (warehouse.Register in each engine's init). Import it for its side
// effect; a new engine adds its blank import here.
package engines

import (
	_ "counterpart/warehouse/duckdb"
	_ "counterpart/warehouse/postgres"
)
