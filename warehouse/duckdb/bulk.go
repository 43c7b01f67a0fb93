package duckdb

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"math"
	"runtime"
	"strings"
	"sync"
	"sync/atomic"

	duckdb "github.com/duckdb/duckdb-go/v2"

	sqltext "counterpart/sql"
	"counterpart/warehouse/sqlcore"
)

// Bulk writes go through a table function that hands DuckDB our columnar
// slices chunk by chunk, followed by INSERT … SELECT. Compared with the
// row appender it sets each value with a typed call instead of boxing it
// in an interface, writes the run id once as a bound parameter rather than
// once per row, and turns categorical codes into their level text inside
// DuckDB. Being an ordinary INSERT, it takes part in the open transaction
// like any other statement.

// bulkSource serves one INSERT's columns to DuckDB. DuckDB may call
// FillChunk from several threads at once; each call claims the next block
// of rows atomically, so the threads fill disjoint chunks. (Row order in
// the table then follows the threads, which is fine: the contract's
// tables are keyed by run, set and unit, not by position.)
type bulkSource struct {
	cols  []sqlcore.BulkCol
	n     int
	next  atomic.Int64
	infos []duckdb.ColumnInfo
}

func (s *bulkSource) ColumnInfos() []duckdb.ColumnInfo { return s.infos }

func (s *bulkSource) Cardinality() *duckdb.CardinalityInfo {
	return &duckdb.CardinalityInfo{Cardinality: uint(s.n), Exact: true}
}

func (s *bulkSource) Init() duckdb.ParallelTableSourceInfo {
	return duckdb.ParallelTableSourceInfo{MaxThreads: runtime.GOMAXPROCS(0)}
}

func (s *bulkSource) NewLocalState() any { return new(int) }

func (s *bulkSource) FillChunk(_ any, ch duckdb.DataChunk) error {
	capacity := duckdb.GetDataChunkCapacity()
	off := int(s.next.Add(int64(capacity))) - capacity
	size := min(capacity, s.n-off)
	if size <= 0 {
		return ch.SetSize(0)
	}
	for j, c := range s.cols {
		var err error
		for r := 0; r < size && err == nil; r++ {
			i := c.At(off + r)
			switch {
			case c.F64 != nil:
				if v := c.F64[i]; math.IsNaN(v) {
					err = ch.SetValue(j, r, nil)
				} else {
					err = duckdb.SetChunkValue(ch, j, r, v)
				}
			case c.I64 != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.I64[i])
			case c.Codes != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.Codes[i])
			case c.B != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.B[i])
			case c.S != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.S[i])
			}
		}
		if err != nil {
			return fmt.Errorf("bulk column %d: %w", j, err)
		}
	}
	return ch.SetSize(size)
}

// bulk is the per-connection table function and the sources waiting for
// their INSERT.
type bulk struct {
	name    string
	mu      sync.Mutex
	pending map[int64]*bulkSource
	next    int64
}

// registerBulk adds this connection's bulk table function under a name of
// its own, so several open warehouses in one process never collide.
func registerBulk(w *Warehouse) error {
	var b [6]byte
	if _, err := rand.Read(b[:]); err != nil {
		return err
	}
	bk := &bulk{name: "counterpart_bulk_" + hex.EncodeToString(b[:]), pending: map[int64]*bulkSource{}}
	bigint, err := duckdb.NewTypeInfo(duckdb.TYPE_BIGINT)
	if err != nil {
		return err
	}
	fn := duckdb.ParallelChunkTableFunction{
		Config: duckdb.TableFunctionConfig{Arguments: []duckdb.TypeInfo{bigint}},
		BindArguments: func(_ map[string]any, args ...any) (duckdb.ParallelChunkTableSource, error) {
			key, _ := args[0].(int64)
			bk.mu.Lock()
			defer bk.mu.Unlock()
			s, ok := bk.pending[key]
			if !ok {
				return nil, fmt.Errorf("no bulk source %d", key)
			}
			return s, nil
		},
	}
	if err := duckdb.RegisterTableUDF(w.conn, bk.name, fn); err != nil {
		return err
	}
	w.bulk = bk
	return nil
}

// Bulk runs INSERT INTO table (run_id, names) SELECT $1, exprs FROM the
// bulk function, with $1 the run id (neither without one); categorical
// codes become their level text inside DuckDB.
func (a *adapter) Bulk(ctx context.Context, table, runID string, cols []sqlcore.BulkCol, n int) error {
	if a.bulk == nil {
		return fmt.Errorf("bulk writes need a read-write warehouse")
	}
	src := &bulkSource{n: n, cols: cols}
	var exprs []string
	var args []any
	if runID != "" {
		exprs, args = []string{"$1"}, []any{runID}
	}
	for i, c := range cols {
		kind, expr := duckdb.TYPE_DOUBLE, fmt.Sprintf("c%d", i)
		switch {
		case c.I64 != nil:
			kind = duckdb.TYPE_BIGINT
		case c.Codes != nil:
			quoted := make([]string, len(c.Levels))
			for i, l := range c.Levels {
				quoted[i] = sqltext.Literal(l)
			}
			kind, expr = duckdb.TYPE_INTEGER, "(["+strings.Join(quoted, ", ")+"]::VARCHAR[])["+expr+" + 1]"
		case c.B != nil:
			kind = duckdb.TYPE_BOOLEAN
		case c.S != nil:
			kind = duckdb.TYPE_VARCHAR
		}
		info, err := duckdb.NewTypeInfo(kind)
		if err != nil {
			return err
		}
		src.infos = append(src.infos, duckdb.ColumnInfo{Name: fmt.Sprintf("c%d", i), T: info})
		exprs = append(exprs, expr)
	}
	b := a.bulk
	b.mu.Lock()
	b.next++
	key := b.next
	b.pending[key] = src
	b.mu.Unlock()
	defer func() {
		b.mu.Lock()
		delete(b.pending, key)
		b.mu.Unlock()
	}()
	q := fmt.Sprintf("INSERT INTO %s (%s) SELECT %s FROM %s(%d)", table, sqlcore.BulkNames(runID, cols), strings.Join(exprs, ", "), b.name, key)
	_, err := a.conn.ExecContext(ctx, q, args...)
	return err
}
