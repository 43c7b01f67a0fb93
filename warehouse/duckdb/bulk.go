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
	"counterpart/warehouse"
)

// Bulk writes go through a table function that hands DuckDB our columnar
// slices chunk by chunk, followed by INSERT … SELECT. Compared with the
// row appender it sets each value with a typed call instead of boxing it
// in an interface, writes the run id once as a bound parameter rather than
// once per row, and turns categorical codes into their level text inside
// DuckDB. Being an ordinary INSERT, it takes part in the open transaction
// like any other statement.

// bulkCol is one source column. Exactly one of the slices is set; idx,
// when set, makes row r read element idx[r] (matches rows point into the
// cohort's unit ids).
type bulkCol struct {
	f64  []float64 // NaN is written as NULL
	i64  []int64
	i32  []int32
	b    []bool
	s    []string
	idx  []int
	kind duckdb.Type
}

func (c bulkCol) at(r int) int {
	if c.idx != nil {
		return c.idx[r]
	}
	return r
}

// bulkSource serves one INSERT's columns to DuckDB. DuckDB may call
// FillChunk from several threads at once; each call claims the next block
// of rows atomically, so the threads fill disjoint chunks. (Row order in
// the table then follows the threads, which is fine: the contract's
// tables are keyed by run, set and unit, not by position.)
type bulkSource struct {
	cols  []bulkCol
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
			i := c.at(off + r)
			switch {
			case c.f64 != nil:
				if v := c.f64[i]; math.IsNaN(v) {
					err = ch.SetValue(j, r, nil)
				} else {
					err = duckdb.SetChunkValue(ch, j, r, v)
				}
			case c.i64 != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.i64[i])
			case c.i32 != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.i32[i])
			case c.b != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.b[i])
			case c.s != nil:
				err = duckdb.SetChunkValue(ch, j, r, c.s[i])
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
func registerBulk(ctx context.Context, w *Warehouse) error {
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

// bulkTarget is one column of the target table and the SQL expression
// that fills it from the source column named src (or a constant).
type bulkTarget struct {
	name string
	expr string // uses the placeholder {} for the source column
	col  *bulkCol
}

// insertBulk runs INSERT INTO schema.table (names) SELECT $1, exprs FROM
// the bulk function, with $1 the run id.
func (w *Warehouse) insertBulk(ctx context.Context, schema, table, runID string, targets []bulkTarget, n int) error {
	if w.bulk == nil {
		return fmt.Errorf("bulk writes need a read-write warehouse")
	}
	src := &bulkSource{n: n}
	names := []string{warehouse.Quote("run_id")}
	exprs := []string{"$1"}
	for _, t := range targets {
		names = append(names, warehouse.Quote(t.name))
		colName := fmt.Sprintf("c%d", len(src.cols))
		info, err := duckdb.NewTypeInfo(t.col.kind)
		if err != nil {
			return err
		}
		src.cols = append(src.cols, *t.col)
		src.infos = append(src.infos, duckdb.ColumnInfo{Name: colName, T: info})
		expr := colName
		if t.expr != "" {
			expr = strings.ReplaceAll(t.expr, "{}", colName)
		}
		exprs = append(exprs, expr)
	}
	b := w.bulk
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
	q := fmt.Sprintf("INSERT INTO %s (%s) SELECT %s FROM %s(%d)",
		warehouse.QuoteQualified(schema, table), strings.Join(names, ", "), strings.Join(exprs, ", "), b.name, key)
	if _, err := w.exec(ctx, q, runID); err != nil {
		return fmt.Errorf("insert into %s: %w", table, dbErr(err))
	}
	return nil
}

// levelsExpr maps a 0-based code column to its level text.
func levelsExpr(levels []string) string {
	quoted := make([]string, len(levels))
	for i, l := range levels {
		quoted[i] = sqltext.Literal(l)
	}
	return "([" + strings.Join(quoted, ", ") + "]::VARCHAR[])[{} + 1]"
}
