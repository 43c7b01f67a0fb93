package duckdb

import (
	"context"
	"database/sql/driver"
	"fmt"
	"math"
	"math/big"
	"reflect"
	"strconv"
	"time"
	"unsafe"

	duckdb "github.com/duckdb/duckdb-go/v2"
	"github.com/duckdb/duckdb-go/v2/mapping"

	"counterpart/warehouse/sqlcore"
)

// Columnar read of the cohort.
//
// database/sql hands the analyst's result over one row at a time: every
// value becomes a driver.Value (an interface, often an allocation: a
// string copy, a time.Time, a *big.Int), passes a type switch, and the
// sink formats each number as text in case a message needs it. On the
// 1M-unit benchmark cohort that is about ten times what reading the
// columns costs (BenchmarkReadPaths1M). Here the same result is read a
// data chunk (up to 2,048 rows) at a time through DuckDB's C data-chunk
// interface; each used column's vector is decoded in one loop straight
// into its sink, runs of numbers through the sink's sqlcore.Batch, with
// the values the row path would have given, bit for bit
// (TestChunksMatchRows).
//
// duckdb-go's Arrow interface would do the same but builds only with the
// duckdb_arrow tag, which neither `go test ./...` nor `go run` sets; its
// data-chunk interface has no exported way to fetch a query's chunks, so
// the chunks are fetched from the driver's own result (resultOf). The row
// path (sqlcore.SQLDecoder) stays as the fallback should a driver upgrade
// move that result; TestResultOf fails first, so the slowdown is seen.

// Stream runs text on the dedicated connection and feeds the result's
// columns to the sinks a data chunk at a time.
func (a *adapter) Stream(ctx context.Context, text string, open func([]sqlcore.Column) ([]sqlcore.Sink, error)) error {
	fallback := false
	err := a.conn.Raw(func(dc any) error {
		qc, ok := dc.(driver.QueryerContext)
		if !ok {
			fallback = true
			return nil
		}
		r, err := qc.QueryContext(ctx, text, nil)
		if err != nil {
			return fmt.Errorf("cohort.sql: %w", queryError(err))
		}
		defer r.Close()
		res, ok := resultOf(r)
		if !ok {
			fallback = true
			return nil
		}
		return readChunks(ctx, r, res, open)
	})
	if fallback {
		return a.streamRows(ctx, text, open)
	}
	return err
}

// streamRows is the row path: database/sql, one driver.Value per value.
func (a *adapter) streamRows(ctx context.Context, text string, open func([]sqlcore.Column) ([]sqlcore.Sink, error)) error {
	return decoder.Stream(ctx, a.conn, text, open)
}

// resultType is the type of the driver's result handle.
var resultType = reflect.TypeFor[mapping.Result]()

// resultOf reaches the DuckDB result behind duckdb-go's driver.Rows (its
// unexported field res). The field's name and type are checked at run
// time, so a driver that moves it makes the read fall back to rows
// instead of misreading memory. The result stays owned by r: r.Close
// destroys it, and since r.Next is never called r holds no chunk of its
// own.
func resultOf(r driver.Rows) (*mapping.Result, bool) {
	v := reflect.ValueOf(r)
	if v.Kind() != reflect.Pointer || v.IsNil() || v.Elem().Kind() != reflect.Struct {
		return nil, false
	}
	f := v.Elem().FieldByName("res")
	if !f.IsValid() || f.Type() != resultType {
		return nil, false
	}
	return (*mapping.Result)(unsafe.Pointer(f.UnsafeAddr())), true
}

// readChunks describes r's columns exactly as the row path does (the
// driver's database type names), opens the sinks and decodes every
// chunk of res. The context is checked between chunks: the query itself
// has already run under the driver's interrupt.
func readChunks(ctx context.Context, r driver.Rows, res *mapping.Result, open func([]sqlcore.Column) ([]sqlcore.Sink, error)) error {
	names := r.Columns()
	tn, _ := r.(driver.RowsColumnTypeDatabaseTypeName)
	cols := make([]sqlcore.Column, len(names))
	for i, name := range names {
		typ := ""
		if tn != nil {
			typ = tn.ColumnTypeDatabaseTypeName(i)
		}
		cols[i] = sqlcore.Column{Name: name, Type: typ, Class: classOf(typ)}
	}
	sinks, err := open(cols)
	if err != nil {
		return err
	}
	var readers []*vecReader
	for i, s := range sinks {
		if s == nil {
			continue
		}
		vr, err := newVecReader(res, i, s)
		if err != nil {
			return fmt.Errorf("cohort.sql: column %s: %w", names[i], err)
		}
		readers = append(readers, vr)
	}
	for {
		if err := ctx.Err(); err != nil {
			return fmt.Errorf("cohort.sql: %w", queryError(err))
		}
		chunk := mapping.FetchChunk(*res)
		if chunk.Ptr == nil {
			return nil
		}
		n := int(mapping.DataChunkGetSize(chunk))
		for _, vr := range readers {
			vec := mapping.DataChunkGetVector(chunk, mapping.IdxT(vr.col))
			vr.read(mapping.VectorGetData(vec), mapping.VectorGetValidity(vec), n)
		}
		mapping.DestroyDataChunk(&chunk)
	}
}

// vecReader decodes one used column's vectors into its sink.
type vecReader struct {
	col  int
	sink sqlcore.Sink
	typ  duckdb.Type
	// internal is the physical type of a DECIMAL or ENUM; scale and width
	// a DECIMAL's; dict an ENUM's values.
	internal     duckdb.Type
	scale, width uint8
	dict         []string
	// batch is the sink's block interface (nil: value by value); floats
	// and ints are its reused buffers for converted narrow types.
	batch  sqlcore.Batch
	floats []float64
	ints   []int64
}

func newVecReader(res *mapping.Result, i int, s sqlcore.Sink) (*vecReader, error) {
	lt := mapping.ColumnLogicalType(res, mapping.IdxT(i))
	defer mapping.DestroyLogicalType(&lt)
	vr := &vecReader{col: i, sink: s, typ: mapping.GetTypeId(lt)}
	vr.batch, _ = s.(sqlcore.Batch)
	switch vr.typ {
	case duckdb.TYPE_BOOLEAN, duckdb.TYPE_TINYINT, duckdb.TYPE_SMALLINT, duckdb.TYPE_INTEGER, duckdb.TYPE_BIGINT,
		duckdb.TYPE_UTINYINT, duckdb.TYPE_USMALLINT, duckdb.TYPE_UINTEGER, duckdb.TYPE_UBIGINT,
		duckdb.TYPE_HUGEINT, duckdb.TYPE_UHUGEINT, duckdb.TYPE_FLOAT, duckdb.TYPE_DOUBLE,
		duckdb.TYPE_VARCHAR, duckdb.TYPE_DATE, duckdb.TYPE_SQLNULL:
	case duckdb.TYPE_DECIMAL:
		vr.internal, vr.scale, vr.width = mapping.DecimalInternalType(lt), mapping.DecimalScale(lt), mapping.DecimalWidth(lt)
		switch vr.internal {
		case duckdb.TYPE_SMALLINT, duckdb.TYPE_INTEGER, duckdb.TYPE_BIGINT, duckdb.TYPE_HUGEINT:
		default:
			return nil, fmt.Errorf("DECIMAL stored as type %d is not supported", vr.internal)
		}
	case duckdb.TYPE_ENUM:
		vr.internal = mapping.EnumInternalType(lt)
		switch vr.internal {
		case duckdb.TYPE_UTINYINT, duckdb.TYPE_USMALLINT, duckdb.TYPE_UINTEGER:
		default:
			return nil, fmt.Errorf("ENUM stored as type %d is not supported", vr.internal)
		}
		vr.dict = make([]string, mapping.EnumDictionarySize(lt))
		for k := range vr.dict {
			vr.dict[k] = mapping.EnumDictionaryValue(lt, mapping.IdxT(k))
		}
	default:
		// The collector accepts only the classes above; anything else
		// reaching here is a classOf the decoder does not know.
		return nil, fmt.Errorf("unexpected DuckDB type %d", vr.typ)
	}
	return vr, nil
}

// valid reads bit row of a validity mask (nil: all valid).
func valid(mask unsafe.Pointer, row int) bool {
	if mask == nil {
		return true
	}
	return *(*uint64)(unsafe.Add(mask, row/64*8))&(1<<(row%64)) != 0
}

// hugeint is duckdb_hugeint's layout (and duckdb_uhugeint's with an
// unsigned upper half).
type hugeint struct {
	lower uint64
	upper int64
}

// read feeds n rows of one vector to the sink, each value as the row path
// gives it (sqlcore's scanner over the driver's Go values).
func (vr *vecReader) read(data, mask unsafe.Pointer, n int) {
	s := vr.sink
	switch vr.typ {
	case duckdb.TYPE_SQLNULL:
		for range n {
			s.Null()
		}
	case duckdb.TYPE_BOOLEAN:
		for i, b := range unsafe.Slice((*bool)(data), n) {
			if valid(mask, i) {
				s.Bool(b)
			} else {
				s.Null()
			}
		}
	case duckdb.TYPE_TINYINT:
		readInts[int8](vr, data, mask, n)
	case duckdb.TYPE_SMALLINT:
		readInts[int16](vr, data, mask, n)
	case duckdb.TYPE_INTEGER:
		readInts[int32](vr, data, mask, n)
	case duckdb.TYPE_BIGINT:
		if vr.batch == nil {
			readInts[int64](vr, data, mask, n)
			break
		}
		v := unsafe.Slice((*int64)(data), n)
		eachRun(mask, n, func(lo, hi int) { vr.batch.Ints(v[lo:hi]) }, s.Null)
	case duckdb.TYPE_UTINYINT:
		readInts[uint8](vr, data, mask, n)
	case duckdb.TYPE_USMALLINT:
		readInts[uint16](vr, data, mask, n)
	case duckdb.TYPE_UINTEGER:
		readInts[uint32](vr, data, mask, n)
	case duckdb.TYPE_UBIGINT:
		for i, x := range unsafe.Slice((*uint64)(data), n) {
			switch {
			case !valid(mask, i):
				s.Null()
			case x > math.MaxInt64:
				s.Exact(float64(x), strconv.FormatUint(x, 10), true)
			default:
				s.Int(int64(x))
			}
		}
	case duckdb.TYPE_HUGEINT, duckdb.TYPE_UHUGEINT:
		unsigned := vr.typ == duckdb.TYPE_UHUGEINT
		for i, h := range unsafe.Slice((*hugeint)(data), n) {
			switch {
			case !valid(mask, i):
				s.Null()
			case h.upper == 0 && h.lower <= math.MaxInt64, !unsigned && h.upper == -1 && h.lower > math.MaxInt64:
				s.Int(int64(h.lower))
			default:
				t := wideInt(h, unsigned)
				f, _ := new(big.Float).SetInt(t).Float64()
				s.Exact(f, t.String(), true)
			}
		}
	case duckdb.TYPE_FLOAT:
		v := unsafe.Slice((*float32)(data), n)
		if vr.batch == nil {
			eachRun(mask, n, func(lo, hi int) {
				for _, f := range v[lo:hi] {
					s.Float(float64(f))
				}
			}, s.Null)
			break
		}
		eachRun(mask, n, func(lo, hi int) {
			vr.floats = vr.floats[:0]
			for _, f := range v[lo:hi] {
				vr.floats = append(vr.floats, float64(f))
			}
			vr.batch.Floats(vr.floats)
		}, s.Null)
	case duckdb.TYPE_DOUBLE:
		v := unsafe.Slice((*float64)(data), n)
		if vr.batch == nil {
			eachRun(mask, n, func(lo, hi int) {
				for _, f := range v[lo:hi] {
					s.Float(f)
				}
			}, s.Null)
			break
		}
		eachRun(mask, n, func(lo, hi int) { vr.batch.Floats(v[lo:hi]) }, s.Null)
	case duckdb.TYPE_VARCHAR:
		for i := range n {
			if valid(mask, i) {
				s.Text(stringAt(data, i)) // a view: sinks copy what they keep
			} else {
				s.Null()
			}
		}
	case duckdb.TYPE_ENUM:
		for i := range n {
			if !valid(mask, i) {
				s.Null()
				continue
			}
			var k int
			switch vr.internal {
			case duckdb.TYPE_UTINYINT:
				k = int(*(*uint8)(unsafe.Add(data, i)))
			case duckdb.TYPE_USMALLINT:
				k = int(*(*uint16)(unsafe.Add(data, 2*i)))
			default:
				k = int(*(*uint32)(unsafe.Add(data, 4*i)))
			}
			s.Text(vr.dict[k])
		}
	case duckdb.TYPE_DATE:
		for i, d := range unsafe.Slice((*int32)(data), n) {
			if valid(mask, i) {
				s.Date(dateDays(d))
			} else {
				s.Null()
			}
		}
	case duckdb.TYPE_DECIMAL:
		if vr.batch == nil {
			eachRun(mask, n, func(lo, hi int) {
				for i := lo; i < hi; i++ {
					d := vr.decimal(data, i)
					s.Exact(decimalFloat(d), d.String(), false)
				}
			}, s.Null)
			break
		}
		eachRun(mask, n, func(lo, hi int) {
			vr.floats = vr.floats[:0]
			for i := lo; i < hi; i++ {
				vr.floats = append(vr.floats, vr.decimalFloat(data, i))
			}
			vr.batch.Exacts(vr.floats, func(k int) string { return vr.decimal(data, lo+k).String() })
		}, s.Null)
	}
}

// unscaled is row i of a DECIMAL vector stored in 16, 32 or 64 bits.
func (vr *vecReader) unscaled(data unsafe.Pointer, i int) int64 {
	switch vr.internal {
	case duckdb.TYPE_SMALLINT:
		return int64(*(*int16)(unsafe.Add(data, 2*i)))
	case duckdb.TYPE_INTEGER:
		return int64(*(*int32)(unsafe.Add(data, 4*i)))
	}
	return *(*int64)(unsafe.Add(data, 8*i))
}

// decimal is row i of a DECIMAL vector as the driver gives it.
func (vr *vecReader) decimal(data unsafe.Pointer, i int) duckdb.Decimal {
	var v *big.Int
	if vr.internal == duckdb.TYPE_HUGEINT {
		v = wideInt(*(*hugeint)(unsafe.Add(data, 16*i)), false)
	} else {
		v = big.NewInt(vr.unscaled(data, i))
	}
	return duckdb.Decimal{Width: vr.width, Scale: vr.scale, Value: v}
}

// decimalFloat is decimalFloat(vr.decimal(data, i)) without building the
// big.Int when its fast case applies.
func (vr *vecReader) decimalFloat(data unsafe.Pointer, i int) float64 {
	if vr.internal != duckdb.TYPE_HUGEINT && int(vr.scale) < len(pow10) {
		if v := vr.unscaled(data, i); v > -(1<<53) && v < 1<<53 {
			return float64(v) / pow10[vr.scale]
		}
	}
	return decimalFloat(vr.decimal(data, i))
}

// readInts feeds a vector of an integer type as int64s: runs of them to
// a Batch, else one by one.
func readInts[T int8 | int16 | int32 | int64 | uint8 | uint16 | uint32](vr *vecReader, data, mask unsafe.Pointer, n int) {
	v, s := unsafe.Slice((*T)(data), n), vr.sink
	if vr.batch == nil {
		eachRun(mask, n, func(lo, hi int) {
			for _, x := range v[lo:hi] {
				s.Int(int64(x))
			}
		}, s.Null)
		return
	}
	eachRun(mask, n, func(lo, hi int) {
		vr.ints = vr.ints[:0]
		for _, x := range v[lo:hi] {
			vr.ints = append(vr.ints, int64(x))
		}
		vr.batch.Ints(vr.ints)
	}, s.Null)
}

// eachRun walks rows 0…n-1 in order: run for each maximal run [lo, hi)
// of valid rows, null for each NULL row.
func eachRun(mask unsafe.Pointer, n int, run func(lo, hi int), null func()) {
	if mask == nil {
		if n > 0 {
			run(0, n)
		}
		return
	}
	for i := 0; i < n; {
		j := i
		for j < n && valid(mask, j) {
			j++
		}
		if j > i {
			run(i, j)
		}
		for ; j < n && !valid(mask, j); j++ {
			null()
		}
		i = j
	}
}

// wideInt is a (U)HUGEINT as a big.Int, as the driver builds it.
func wideInt(h hugeint, unsigned bool) *big.Int {
	var t *big.Int
	if unsigned {
		t = new(big.Int).SetUint64(uint64(h.upper))
	} else {
		t = big.NewInt(h.upper)
	}
	t.Lsh(t, 64)
	return t.Add(t, new(big.Int).SetUint64(h.lower))
}

// stringAt is row i of a VARCHAR vector, a view of DuckDB's memory:
// duckdb_string_t is a uint32 length, then the bytes inline when there
// are at most 12 of them, else a 4-byte prefix and a pointer at offset 8.
func stringAt(data unsafe.Pointer, i int) string {
	p := unsafe.Add(data, 16*i)
	n := *(*uint32)(p)
	if n <= 12 {
		return unsafe.String((*byte)(unsafe.Add(p, 4)), int(n))
	}
	return unsafe.String(*(**byte)(unsafe.Add(p, 8)), int(n))
}

// Days 0001-01-01 and 9999-12-31 since 1970-01-01: inside these DuckDB's
// and Go's calendars agree, so the stored day count is what the row path's
// time.Time gives.
const minPlainDay, maxPlainDay = -719162, 2932896

// dateDays is a DATE as the row path reads it: the driver turns it into
// a time.Time through DuckDB's calendar (duckdb_from_date) and the scanner
// takes days since 1970-01-01 from it. Outside years 1–9999 (and for
// ±infinity) that same conversion is done here.
func dateDays(d int32) float64 {
	if d >= minPlainDay && d <= maxPlainDay {
		return float64(d)
	}
	ds := mapping.FromDate(mapping.NewDate(d))
	y, m, day := mapping.DateStructMembers(&ds)
	t := time.Date(int(y), time.Month(m), int(day), 0, 0, 0, 0, time.UTC)
	days := t.Unix() / 86400
	if t.Unix()%86400 < 0 {
		days--
	}
	return float64(days)
}
