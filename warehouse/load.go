package warehouse

import (
	"context"
	"errors"
	"fmt"
)

// LoadColumn is one column of a table LoadTable writes.
type LoadColumn struct {
	Name string
	// Type is the column's SQL type as the engine spells it (BIGINT,
	// INTEGER, DOUBLE PRECISION, VARCHAR, BOOLEAN); it must take Values
	// as they are (an engine's binary bulk path does not narrow: []int64
	// into a Postgres INTEGER column fails).
	Type    string
	Comment string
	// Values is a []int64, []float64, []string or []bool of the table's
	// length.
	Values any
}

// Loader is an engine that can create and fill a table from Go values.
type Loader interface {
	LoadTable(ctx context.Context, schema, table, comment string, cols []LoadColumn) error
}

// LoadTable creates (or replaces) schema.table, and schema when absent,
// in the warehouse engine opens at dsn, and fills it through the engine's
// bulk path, in one transaction. It exists for the synthetic demo
// warehouse and for tests; analysis runs never call it, so it may create
// a schema, which nothing else does.
func LoadTable(ctx context.Context, engine, dsn, schema, table, comment string, cols []LoadColumn) error {
	w, err := Open(ctx, engine, dsn, OpenOptions{})
	if err != nil {
		return fmt.Errorf("load table: %w", err)
	}
	l, ok := w.(Loader)
	if !ok {
		err = fmt.Errorf("load table: engine %s cannot load tables", engine)
	} else {
		err = l.LoadTable(ctx, schema, table, comment, cols)
	}
	return errors.Join(err, w.Close())
}
