package postgres

import (
	"context"
	"encoding/binary"
	"fmt"
	"io"
	"math"

	"counterpart/warehouse/sqlcore"
)

// field appends one value of row i in COPY's binary tuple format: a 4-byte
// length (−1 for NULL) and the value's binary send form.
type field func(buf []byte, i int) []byte

func textField(get func(i int) string) field {
	return func(buf []byte, i int) []byte {
		s := get(i)
		buf = binary.BigEndian.AppendUint32(buf, uint32(len(s)))
		return append(buf, s...)
	}
}

func int64Field(get func(i int) int64) field {
	return func(buf []byte, i int) []byte {
		buf = binary.BigEndian.AppendUint32(buf, 8)
		return binary.BigEndian.AppendUint64(buf, uint64(get(i)))
	}
}

// floatField writes float8; NaN (a missing outcome) is written as NULL.
func floatField(v []float64, at func(int) int) field {
	return func(buf []byte, i int) []byte {
		x := v[at(i)]
		if math.IsNaN(x) {
			return binary.BigEndian.AppendUint32(buf, math.MaxUint32) // −1: NULL
		}
		buf = binary.BigEndian.AppendUint32(buf, 8)
		return binary.BigEndian.AppendUint64(buf, math.Float64bits(x))
	}
}

func boolField(v []bool) field {
	return func(buf []byte, i int) []byte {
		buf = binary.BigEndian.AppendUint32(buf, 1)
		if v[i] {
			return append(buf, 1)
		}
		return append(buf, 0)
	}
}

// copyHeader is the binary COPY signature, flags and header extension
// length (PostgreSQL manual, COPY, "Binary Format").
var copyHeader = []byte("PGCOPY\n\xff\r\n\x00\x00\x00\x00\x00\x00\x00\x00\x00")

// copyReader produces a binary COPY stream of n rows on demand, a chunk at
// a time, so a million rows never sit in memory as one buffer.
type copyReader struct {
	ctx  context.Context
	cols []field
	n, i int
	buf  []byte
	off  int
	done bool
}

const copyChunk = 1 << 16

func (r *copyReader) Read(p []byte) (int, error) {
	if r.off == len(r.buf) {
		if r.done {
			return 0, io.EOF
		}
		if err := r.ctx.Err(); err != nil {
			return 0, err
		}
		r.buf, r.off = r.buf[:0], 0
		if r.i == 0 {
			r.buf = append(r.buf, copyHeader...)
		}
		for r.i < r.n && len(r.buf) < copyChunk {
			r.buf = binary.BigEndian.AppendUint16(r.buf, uint16(len(r.cols)))
			for _, c := range r.cols {
				r.buf = c(r.buf, r.i)
			}
			r.i++
		}
		if r.i == r.n {
			r.buf = binary.BigEndian.AppendUint16(r.buf, math.MaxUint16) // −1: end of data
			r.done = true
		}
	}
	k := copy(p, r.buf[r.off:])
	r.off += k
	return k, nil
}

// Bulk streams n rows into table with COPY FROM STDIN (FORMAT binary) on
// the run's connection, inside whatever transaction is open there. Only
// the listed columns are written; a table's other columns (those of
// covariates or schemes a study no longer uses) get NULL.
func (w *adapter) Bulk(ctx context.Context, table, runID string, cols []sqlcore.BulkCol, n int) error {
	var puts []field
	if runID != "" {
		puts = append(puts, textField(func(int) string { return runID }))
	}
	for _, c := range cols {
		switch {
		case c.F64 != nil:
			puts = append(puts, floatField(c.F64, c.At))
		case c.I64 != nil:
			puts = append(puts, int64Field(func(i int) int64 { return c.I64[c.At(i)] }))
		case c.Codes != nil:
			puts = append(puts, textField(func(i int) string { return c.Levels[c.Codes[i]] }))
		case c.B != nil:
			puts = append(puts, boolField(c.B))
		default:
			puts = append(puts, textField(func(i int) string { return c.S[c.At(i)] }))
		}
	}
	q := fmt.Sprintf("COPY %s (%s) FROM STDIN (FORMAT binary)", table, sqlcore.BulkNames(runID, cols))
	r := &copyReader{ctx: ctx, cols: puts, n: n, buf: make([]byte, 0, copyChunk+4096)}
	tag, err := w.conn.PgConn().CopyFrom(ctx, r, q)
	if err != nil {
		return err
	}
	if tag.RowsAffected() != int64(n) {
		return fmt.Errorf("%d rows written, want %d", tag.RowsAffected(), n)
	}
	return nil
}
