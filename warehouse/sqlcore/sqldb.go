package sqlcore

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"math/big"
	"strconv"
	"time"

	"counterpart/warehouse"
)

// SQLDecoder reads the analyst's query for an engine whose driver speaks
// database/sql: each used column's values reach its sink through a
// sql.Scanner, so a row costs no allocation beyond the driver's own.
// Values of Go's types are decoded here once (a time.Time is a DATE at
// midnight UTC: days since 1970-01-01); the engine decodes its driver's
// own types.
type SQLDecoder struct {
	// Class reads a result column's type name.
	Class func(dbType string) Class
	// Value feeds a value of a type of the driver's own to s; false when
	// it does not know v either.
	Value func(s Sink, v any) bool
	// Err flattens an error of reading the result's metadata; QueryErr
	// classes an error of the analyst's query (Dialect.Err, QueryErr).
	Err, QueryErr func(error) error
}

// Columns describes text's result from a LIMIT 0 query (nothing is read).
func (d *SQLDecoder) Columns(ctx context.Context, conn *sql.Conn, text string) ([]Column, error) {
	rows, err := conn.QueryContext(ctx, "SELECT * FROM "+warehouse.From(text)+" LIMIT 0")
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: %w", d.QueryErr(err))
	}
	defer rows.Close()
	return d.columns(rows)
}

func (d *SQLDecoder) columns(rows *sql.Rows) ([]Column, error) {
	cts, err := rows.ColumnTypes()
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: column types: %w", d.Err(err))
	}
	cols := make([]Column, len(cts))
	for i, ct := range cts {
		cols[i] = Column{Name: ct.Name(), Type: ct.DatabaseTypeName(), Class: d.Class(ct.DatabaseTypeName())}
	}
	return cols, nil
}

// Stream implements Adapter.Stream on conn.
func (d *SQLDecoder) Stream(ctx context.Context, conn *sql.Conn, text string, open func([]Column) ([]Sink, error)) error {
	rows, err := conn.QueryContext(ctx, text)
	if err != nil {
		return fmt.Errorf("cohort.sql: %w", d.QueryErr(err))
	}
	defer rows.Close()
	cols, err := d.columns(rows)
	if err != nil {
		return err
	}
	sinks, err := open(cols)
	if err != nil {
		return err
	}
	dest := make([]any, len(sinks))
	for i, s := range sinks {
		dest[i] = scanner{s, d.Value}
	}
	for n := 1; rows.Next(); n++ {
		if err := rows.Scan(dest...); err != nil {
			return fmt.Errorf("cohort.sql: row %d: %w", n, err)
		}
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("cohort.sql: %w", d.QueryErr(err))
	}
	return nil
}

// scanner feeds a driver value to a sink (nil: column unused).
type scanner struct {
	s     Sink
	other func(Sink, any) bool
}

func (c scanner) Scan(v any) error {
	s := c.s
	if s == nil {
		return nil
	}
	switch t := v.(type) {
	case nil:
		s.Null()
	case bool:
		s.Bool(t)
	case int64:
		s.Int(t)
	case int32:
		s.Int(int64(t))
	case int16:
		s.Int(int64(t))
	case int8:
		s.Int(int64(t))
	case uint8:
		s.Int(int64(t))
	case uint16:
		s.Int(int64(t))
	case uint32:
		s.Int(int64(t))
	case uint64:
		if t > math.MaxInt64 {
			s.Exact(float64(t), strconv.FormatUint(t, 10), true)
		} else {
			s.Int(int64(t))
		}
	case *big.Int:
		if t.IsInt64() {
			s.Int(t.Int64())
		} else {
			f, _ := new(big.Float).SetInt(t).Float64()
			s.Exact(f, t.String(), true)
		}
	case float64:
		s.Float(t)
	case float32:
		s.Float(float64(t))
	case string:
		s.Text(t)
	case time.Time:
		days := t.Unix() / 86400
		if t.Unix()%86400 < 0 {
			days--
		}
		s.Date(float64(days))
	default:
		if c.other == nil || !c.other(s, v) {
			return fmt.Errorf("unexpected %T", v)
		}
	}
	return nil
}
