package main

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"errors"
	"fmt"
	"reflect"
	"strings"
	"time"
	"unsafe"

	duckdb "github.com/duckdb/duckdb-go/v2"
	"github.com/duckdb/duckdb-go/v2/mapping"
)

// readChunks reads every column a data chunk at a time into a Go slice of
// its type: the vectors' bytes copied, strings cloned, nothing checked.
// The chunks come from the driver's result handle as in
// warehouse/duckdb's chunks.go (duckdb-go exports no other tag-free way).
func readChunks(path string) {
	start := time.Now()
	db, err := sql.Open("duckdb", path)
	if err != nil {
		fail(err)
	}
	conn, err := db.Conn(context.Background())
	if err != nil {
		fail(err)
	}
	n, ncol := 0, 0
	opened := time.Now()
	var queried time.Time
	err = conn.Raw(func(dc any) error {
		r, err := dc.(driver.QueryerContext).QueryContext(context.Background(), "select * from synth.cohort", nil)
		if err != nil {
			return fmt.Errorf("query: %w", err)
		}
		queried = time.Now()
		defer r.Close()
		f := reflect.ValueOf(r).Elem().FieldByName("res")
		if !f.IsValid() || f.Type() != reflect.TypeFor[mapping.Result]() {
			return errors.New("the driver's result handle moved")
		}
		res := (*mapping.Result)(unsafe.Pointer(f.UnsafeAddr()))
		ncol = len(r.Columns())
		types := make([]duckdb.Type, ncol)
		for i := range types {
			lt := mapping.ColumnLogicalType(res, mapping.IdxT(i))
			types[i] = mapping.GetTypeId(lt)
			mapping.DestroyLogicalType(&lt)
		}
		ints := make([][]int64, ncol)
		i32s := make([][]int32, ncol)
		bools := make([][]bool, ncol)
		floats := make([][]float64, ncol)
		texts := make([][]string, ncol)
		for {
			chunk := mapping.FetchChunk(*res)
			if chunk.Ptr == nil {
				return nil
			}
			size := int(mapping.DataChunkGetSize(chunk))
			for i, t := range types {
				data := mapping.VectorGetData(mapping.DataChunkGetVector(chunk, mapping.IdxT(i)))
				switch t {
				case duckdb.TYPE_BIGINT:
					ints[i] = append(ints[i], unsafe.Slice((*int64)(data), size)...)
				case duckdb.TYPE_INTEGER:
					i32s[i] = append(i32s[i], unsafe.Slice((*int32)(data), size)...)
				case duckdb.TYPE_BOOLEAN:
					bools[i] = append(bools[i], unsafe.Slice((*bool)(data), size)...)
				case duckdb.TYPE_DOUBLE:
					floats[i] = append(floats[i], unsafe.Slice((*float64)(data), size)...)
				case duckdb.TYPE_VARCHAR:
					for k := range size {
						texts[i] = append(texts[i], strings.Clone(stringAt(data, k)))
					}
				default:
					return fmt.Errorf("column %d: type %d not in the benchmark cohort", i, t)
				}
			}
			n += size
			mapping.DestroyDataChunk(&chunk)
		}
	})
	if err != nil {
		fail(err)
	}
	end := time.Now()
	fmt.Printf("read %d rows x %d columns in chunks in %.2f s (open %.2f s, query %.2f s, fetch and copy %.2f s)\n", n, ncol,
		end.Sub(start).Seconds(), opened.Sub(start).Seconds(), queried.Sub(opened).Seconds(), end.Sub(queried).Seconds())
}

// stringAt is row i of a VARCHAR vector (duckdb_string_t: length, then
// the bytes inline up to 12, else a prefix and a pointer at offset 8).
func stringAt(data unsafe.Pointer, i int) string {
	p := unsafe.Add(data, 16*i)
	n := *(*uint32)(p)
	if n <= 12 {
		return unsafe.String((*byte)(unsafe.Add(p, 4)), int(n))
	}
	return unsafe.String(*(**byte)(unsafe.Add(p, 8)), int(n))
}
