package duckdb

import (
	"context"
	"database/sql/driver"
	"errors"
	"fmt"
	"math"
	"reflect"
	"slices"
	"strings"
	"testing"

	"github.com/duckdb/duckdb-go/v2/mapping"

	"counterpart/warehouse"
	"counterpart/warehouse/sqlcore"
)

// chunkTypes are the column types the equivalence test reads: every type
// the collector accepts, each as an expression of the row number i.
var chunkTypes = []struct{ name, expr string }{
	{"tinyint", "(i % 200 - 100)::TINYINT"},
	{"smallint", "(i * 13 % 60000 - 30000)::SMALLINT"},
	{"integer", "(i * 7919 - 20000000)::INTEGER"},
	{"bigint", "i::BIGINT * 1000000007 - 2000000000000"},
	{"utinyint", "(i % 256)::UTINYINT"},
	{"usmallint", "(i % 65536)::USMALLINT"},
	{"uinteger", "(i::BIGINT * 859000 % 4294967295)::UINTEGER"},
	{"ubigint", "(CASE WHEN i % 5 = 0 THEN 18446744073709551615 - i ELSE i END)::UBIGINT"},
	{"hugeint", `(CASE i % 6 WHEN 0 THEN (i::HUGEINT - 2500) * 100000000000000000000
		WHEN 1 THEN -9223372036854775808::HUGEINT WHEN 2 THEN -9223372036854775809::HUGEINT
		WHEN 3 THEN 9223372036854775807::HUGEINT ELSE i::HUGEINT - 2500 END)`},
	{"uhugeint", `(CASE i % 3 WHEN 0 THEN i::UHUGEINT * 100000000000000000000
		WHEN 1 THEN 9223372036854775808::UHUGEINT ELSE i::UHUGEINT END)`},
	{"float", "(i / 7.0)::FLOAT"},
	{"double", "CASE WHEN i % 2 = 0 THEN i / 3.0 ELSE sin(i) * 1e300 END"},
	{"dec4", "(((i % 1999) - 999) / 10)::DECIMAL(4,1)"},
	{"dec9", "(((i * 7 % 1999999) - 999999) / 1000)::DECIMAL(9,3)"},
	{"dec18", "((((i::BIGINT * 7777777) % 999999999999) - 555555555555) / 1000000)::DECIMAL(18,6)"},
	{"dec38", `(CASE WHEN i % 3 = 0 THEN 1234567890123456789012.3456789012::DECIMAL(38,10) * (i % 7 - 3)
		ELSE i * 1234567.8901234567::DECIMAL(38,10) END)::DECIMAL(38,10)`},
	{"bool", "i % 3 = 1"},
	{"varchar", `CASE i % 4 WHEN 0 THEN 'a' WHEN 1 THEN 'short' || (i % 10)
		WHEN 2 THEN 'a string longer than twelve bytes ' || (i % 13) ELSE '' END`},
	{"mood", "(['sad', 'ok', 'happy'])[i % 3 + 1]::mood"},
	{"wide_enum", "('level' || (i % 300))::wide_enum"},
	{"date", `CASE i % 7 WHEN 0 THEN DATE '0001-01-01' WHEN 1 THEN DATE '9999-12-31'
		WHEN 2 THEN DATE '0001-01-01' - 1 - (i % 100)::INTEGER WHEN 3 THEN DATE '20000-02-29' + i::INTEGER
		ELSE DATE '1970-01-01' + (i * 37 % 40000 - 20000)::INTEGER END`},
}

// chunkRows is more than two 2,048-row chunks.
const chunkRows = 5000

// TestChunksMatchRows: the columnar read and the row path (database/sql)
// give identical cohorts, floats to the bit and categorical levels and
// codes alike, or the same error, over every supported type, with NULLs
// at chunk boundaries and elsewhere, in several roles.
func TestChunksMatchRows(t *testing.T) {
	w := openTemp(t)
	var cols []string
	for k, ty := range chunkTypes {
		// Outcomes hold NULLs: at the first and last row, around the
		// chunk boundary, and on a stride of their own per column.
		null := fmt.Sprintf("i IN (0, 2047, 2048, 4095, 4999) OR (i * 7 + %d) %% %d = 0", k, 11+k)
		cols = append(cols, fmt.Sprintf("%s AS c_%s", ty.expr, ty.name),
			fmt.Sprintf("CASE WHEN %s THEN NULL ELSE %s END AS o_%s", null, ty.expr, ty.name))
	}
	execSQL(t, w, `CREATE TYPE mood AS ENUM ('sad', 'ok', 'happy');
	CREATE TYPE wide_enum AS ENUM (SELECT 'level' || i FROM range(300) r(i) ORDER BY i DESC);
	CREATE TABLE t AS SELECT i AS id, `+strings.Join(cols, ",\n")+fmt.Sprintf(" FROM range(%d) r(i)", chunkRows))

	// Each column has the type its name says (DuckDB's / on DECIMALs,
	// say, gives a DOUBLE).
	types := map[string]string{"dec4": "DECIMAL(4,1)", "dec9": "DECIMAL(9,3)", "dec18": "DECIMAL(18,6)", "dec38": "DECIMAL(38,10)",
		"bool": "BOOLEAN", "mood": "ENUM('sad', 'ok', 'happy')", "wide_enum": "ENUM('level299', "}
	for _, ty := range chunkTypes {
		want, ok := types[ty.name]
		if !ok {
			want = strings.ToUpper(ty.name)
		}
		got := queryRows(t, w, fmt.Sprintf("SELECT DISTINCT typeof(c_%s), typeof(o_%s) FROM t", ty.name, ty.name))
		if len(got) != 1 || got[0][0] != got[0][1] || !strings.HasPrefix(got[0][0].(string), want) {
			t.Errorf("columns c_%s, o_%s have types %v, want %s", ty.name, ty.name, got, want)
		}
	}

	var numeric, categorical, outcomes, all []string
	for _, ty := range chunkTypes {
		switch ty.name {
		case "bool", "varchar", "mood", "wide_enum":
		default:
			numeric = append(numeric, "c_"+ty.name)
		}
		all = append(all, "c_"+ty.name)
		if ty.name != "varchar" && ty.name != "mood" && ty.name != "wide_enum" && ty.name != "date" {
			outcomes = append(outcomes, "o_"+ty.name)
		}
	}
	for _, c := range all {
		if c != "c_float" && c != "c_double" {
			categorical = append(categorical, c)
		}
	}
	sel := "SELECT *, NULL AS o_null, (id % 2)::TINYINT AS t01, (id % 2)::DECIMAL(3,2) AS tdec, (id % 2)::DOUBLE AS tdbl, " +
		"'u' || id AS uid, id::HUGEINT AS hid, id::UBIGINT AS ubid, id % 2 = 0 AS tb FROM t"
	tests := []struct {
		name string
		q    warehouse.CohortQuery
		fail bool // the read must fail (with the same message both ways)
	}{
		{"numeric", warehouse.CohortQuery{SQL: sel, Unit: "id", Treatment: "tb", Covariates: all, Outcomes: append(outcomes, "o_null")}, false},
		{"categorical", warehouse.CohortQuery{SQL: sel, Unit: "uid", Treatment: "t01", Covariates: all, Categorical: categorical, Outcomes: outcomes}, false},
		{"hugeint unit, decimal treatment", warehouse.CohortQuery{SQL: sel + " ORDER BY id DESC", Unit: "hid", Treatment: "tdec", Covariates: numeric[:5]}, false},
		{"ubigint unit, double treatment", warehouse.CohortQuery{SQL: sel, Unit: "ubid", Treatment: "tdbl", Outcomes: []string{"c_bool", "o_bool"}}, false},
		{"NULL covariate", warehouse.CohortQuery{SQL: sel, Unit: "id", Treatment: "tb", Covariates: []string{"c_double", "o_date", "o_dec38"}}, true},
		{"NULL categorical", warehouse.CohortQuery{SQL: sel, Unit: "id", Treatment: "tb", Covariates: []string{"o_varchar"}}, true},
		{"treatment not 0/1", warehouse.CohortQuery{SQL: sel, Unit: "id", Treatment: "c_utinyint"}, true},
		{"unit beyond int64", warehouse.CohortQuery{SQL: sel, Unit: "c_ubigint", Treatment: "tb"}, true},
		{"hugeint unit beyond int64", warehouse.CohortQuery{SQL: sel, Unit: "c_uhugeint", Treatment: "tb"}, true},
		{"duplicate units", warehouse.CohortQuery{SQL: sel, Unit: "c_utinyint", Treatment: "tb"}, true},
		{"non-finite", warehouse.CohortQuery{SQL: "SELECT id, id % 2 = 0 AS tb, CASE WHEN id = 4000 THEN 'nan'::DOUBLE ELSE id END AS x FROM t", Unit: "id", Treatment: "tb", Covariates: []string{"x"}}, true},
		{"infinite categorical date", warehouse.CohortQuery{SQL: "SELECT id, id % 2 = 0 AS tb, CASE WHEN id = 3000 THEN 'infinity'::DATE ELSE DATE '2020-01-01' END AS d FROM t", Unit: "id", Treatment: "tb", Covariates: []string{"d"}, Categorical: []string{"d"}}, false},
		{"infinite dates", warehouse.CohortQuery{SQL: "SELECT id, id % 2 = 0 AS tb, CASE id % 3 WHEN 0 THEN '-infinity'::DATE WHEN 1 THEN 'infinity'::DATE ELSE DATE '2020-01-01' END AS d FROM t", Unit: "id", Treatment: "tb", Covariates: []string{"d"}}, false},
	}
	a := (*adapter)(w)
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			w.testConn(t)
			rows, rerr := collect(a.streamRows, tt.q, false)
			chunks, cerr := collect(a.Stream, tt.q, false)
			plain, perr := collect(a.Stream, tt.q, true)
			if fmt.Sprint(rerr) != fmt.Sprint(cerr) || fmt.Sprint(rerr) != fmt.Sprint(perr) {
				t.Fatalf("rows: %v\nchunks: %v\nchunks value by value: %v", rerr, cerr, perr)
			}
			if tt.fail != (rerr != nil) {
				t.Fatalf("error %v, want failure %v", rerr, tt.fail)
			}
			if rerr != nil {
				return
			}
			if rows.N() != chunkRows {
				t.Fatalf("%d rows", rows.N())
			}
			if path, ok := sameBits(reflect.ValueOf(rows), reflect.ValueOf(chunks), "cohort"); !ok {
				t.Errorf("cohorts differ at %s", path)
			}
			if path, ok := sameBits(reflect.ValueOf(rows), reflect.ValueOf(plain), "cohort"); !ok {
				t.Errorf("value by value, cohorts differ at %s", path)
			}
		})
	}
}

// collect reads q through stream into a Cohort, as ReadCohort does
// without its transaction; plain hides the sinks' Batch methods, so the
// chunks reach them value by value.
func collect(stream func(context.Context, string, func([]sqlcore.Column) ([]sqlcore.Sink, error)) error, q warehouse.CohortQuery, plain bool) (*warehouse.Cohort, error) {
	var k *sqlcore.Collector
	err := stream(context.Background(), q.SQL, func(cols []sqlcore.Column) ([]sqlcore.Sink, error) {
		var err error
		if k, err = sqlcore.NewCollector(q, cols); err != nil {
			return nil, err
		}
		sinks := k.Sinks()
		if plain {
			sinks = slices.Clone(sinks)
			for i, s := range sinks {
				if s != nil {
					sinks[i] = plainSink{s}
				}
			}
		}
		return sinks, nil
	})
	if err != nil {
		return nil, err
	}
	return k.Finish()
}

// plainSink is a Sink without the Batch methods.
type plainSink struct{ sqlcore.Sink }

// sameBits is deep equality with floats compared by their bits (NaN
// equals NaN, 0 differs from -0); on a difference, the path to it.
func sameBits(a, b reflect.Value, path string) (string, bool) {
	if a.Kind() != b.Kind() {
		return path, false
	}
	switch a.Kind() {
	case reflect.Pointer, reflect.Interface:
		if a.IsNil() || b.IsNil() {
			return path, a.IsNil() == b.IsNil()
		}
		return sameBits(a.Elem(), b.Elem(), path)
	case reflect.Struct:
		for i := range a.NumField() {
			if p, ok := sameBits(a.Field(i), b.Field(i), path+"."+a.Type().Field(i).Name); !ok {
				return p, false
			}
		}
	case reflect.Slice:
		if a.Len() != b.Len() || a.IsNil() != b.IsNil() {
			return fmt.Sprintf("%s (len %d, %d)", path, a.Len(), b.Len()), false
		}
		for i := range a.Len() {
			if p, ok := sameBits(a.Index(i), b.Index(i), fmt.Sprintf("%s[%d]", path, i)); !ok {
				return p, false
			}
		}
	case reflect.Float32, reflect.Float64:
		if math.Float64bits(a.Float()) != math.Float64bits(b.Float()) {
			return fmt.Sprintf("%s (%v, %v)", path, a.Float(), b.Float()), false
		}
	case reflect.Map:
		if !reflect.DeepEqual(a.Interface(), b.Interface()) {
			return path, false
		}
	default:
		if !a.Equal(b) {
			return fmt.Sprintf("%s (%v, %v)", path, a, b), false
		}
	}
	return path, true
}

// TestResultOf: the driver's result is reachable, so Stream reads chunks
// rather than falling back to rows (which would pass the test above
// trivially).
func TestResultOf(t *testing.T) {
	w := openTemp(t)
	err := w.testConn(t).Raw(func(dc any) error {
		r, err := dc.(driver.QueryerContext).QueryContext(context.Background(), "SELECT 42 AS x", nil)
		if err != nil {
			return err
		}
		defer r.Close()
		res, ok := resultOf(r)
		if !ok {
			return errors.New("resultOf cannot reach the driver's result")
		}
		if n := mapping.ColumnCount(res); n != 1 {
			return fmt.Errorf("result has %d columns", n)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}

// TestChunksCancel: a cancelled context stops the columnar read, before
// the query runs (with the row path's error) and between chunks.
func TestChunksCancel(t *testing.T) {
	w := openTemp(t)
	execSQL(t, w, fmt.Sprintf("CREATE TABLE t AS SELECT i AS id, i %% 2 = 0 AS tb, i * 0.5 AS x FROM range(%d) r(i)", chunkRows))
	a := (*adapter)(w)
	q := warehouse.CohortQuery{SQL: "SELECT * FROM t", Unit: "id", Treatment: "tb", Covariates: []string{"x"}}
	w.testConn(t)
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	open := func(cols []sqlcore.Column) ([]sqlcore.Sink, error) {
		k, err := sqlcore.NewCollector(q, cols)
		if err != nil {
			return nil, err
		}
		return k.Sinks(), nil
	}
	rerr, cerr := a.streamRows(ctx, q.SQL, open), a.Stream(ctx, q.SQL, open)
	if !errors.Is(cerr, context.Canceled) || fmt.Sprint(rerr) != fmt.Sprint(cerr) {
		t.Errorf("cancelled before the query: rows %v, chunks %v", rerr, cerr)
	}

	// Cancelled while the first chunk is decoded: no further chunk is read.
	ctx, cancel = context.WithCancel(context.Background())
	defer cancel()
	var k *sqlcore.Collector
	err := a.Stream(ctx, q.SQL, func(cols []sqlcore.Column) ([]sqlcore.Sink, error) {
		var err error
		if k, err = sqlcore.NewCollector(q, cols); err != nil {
			return nil, err
		}
		sinks := k.Sinks()
		for i, s := range sinks {
			if s != nil {
				sinks[i] = cancelSink{s, cancel}
			}
		}
		return sinks, nil
	})
	if !errors.Is(err, context.Canceled) || !strings.HasPrefix(err.Error(), "cohort.sql: ") {
		t.Errorf("cancelled during the read: %v", err)
	}
	if n := k.Rows(); n == 0 || n >= chunkRows {
		t.Errorf("%d rows read before stopping, want one chunk", n)
	}
}

// cancelSink cancels its context at the first value it receives.
type cancelSink struct {
	sqlcore.Sink
	cancel func()
}

func (s cancelSink) Int(x int64) { s.cancel(); s.Sink.Int(x) }
