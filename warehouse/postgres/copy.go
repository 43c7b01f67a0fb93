package postgres

import (
	"context"
	"encoding/binary"
	"fmt"
	"io"
	"math"
	"strings"

	"counterpart/warehouse"
)

// field appends one value of row i in COPY's binary tuple format: a 4-byte
// length (−1 for NULL) and the value's binary send form.
type field func(buf []byte, i int) []byte

// copyCol is one column COPY writes.
type copyCol struct {
	name string
	put  field
}

func textField(get func(i int) string) field {
	return func(buf []byte, i int) []byte {
		s := get(i)
		buf = binary.BigEndian.AppendUint32(buf, uint32(len(s)))
		return append(buf, s...)
	}
}

func constText(s string) field { return textField(func(int) string { return s }) }

func int64Field(get func(i int) int64) field {
	return func(buf []byte, i int) []byte {
		buf = binary.BigEndian.AppendUint32(buf, 8)
		return binary.BigEndian.AppendUint64(buf, uint64(get(i)))
	}
}

// floatField writes float8; NaN (a missing outcome) is written as NULL.
func floatField(v []float64) field {
	return func(buf []byte, i int) []byte {
		if math.IsNaN(v[i]) {
			return binary.BigEndian.AppendUint32(buf, math.MaxUint32) // −1: NULL
		}
		buf = binary.BigEndian.AppendUint32(buf, 8)
		return binary.BigEndian.AppendUint64(buf, math.Float64bits(v[i]))
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
	cols []copyCol
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
				r.buf = c.put(r.buf, r.i)
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

// copyRows streams n rows into schema.table with COPY FROM STDIN (FORMAT
// binary) on the run's connection, inside whatever transaction is open
// there. Only the listed columns are written; a table's other columns
// (those of covariates or schemes a study no longer uses) get NULL.
func (w *Warehouse) copyRows(ctx context.Context, schema, table string, cols []copyCol, n int) error {
	names := make([]string, len(cols))
	for i, c := range cols {
		names[i] = warehouse.Quote(c.name)
	}
	q := fmt.Sprintf("COPY %s (%s) FROM STDIN (FORMAT binary)", warehouse.QuoteQualified(schema, table), strings.Join(names, ", "))
	r := &copyReader{ctx: ctx, cols: cols, n: n, buf: make([]byte, 0, copyChunk+4096)}
	tag, err := w.conn.PgConn().CopyFrom(ctx, r, q)
	if err != nil {
		return fmt.Errorf("copy into %s: %w", table, w.dbErr(err))
	}
	if tag.RowsAffected() != int64(n) {
		return fmt.Errorf("copy into %s: %d rows written, want %d", table, tag.RowsAffected(), n)
	}
	return nil
}

// copyAll writes the cohort snapshot, scores, matches and weights of p.
func (w *Warehouse) copyAll(ctx context.Context, o *warehouse.Objects, out warehouse.Output, p *warehouse.Publication) error {
	c := p.Cohort
	run := copyCol{"run_id", constText(p.Run.RunID)}
	// unit writes cohort unit i; matchUnit the unit of match row i.
	var unit field
	if c.IDKind == warehouse.IDInt {
		unit = int64Field(func(i int) int64 { return c.IntIDs[i] })
	} else {
		unit = textField(func(i int) string { return c.TextIDs[i] })
	}

	cohort := []copyCol{run, {out.Unit, unit}, {out.Treatment, boolField(c.Treated)}}
	covs := map[string]*warehouse.Covariate{}
	for i := range c.Covariates {
		covs[c.Covariates[i].Name] = &c.Covariates[i]
	}
	for _, m := range out.Covariates {
		cv := covs[m.Name]
		if m.Kind == warehouse.Categorical {
			levels, codes := cv.Levels, cv.Codes
			cohort = append(cohort, copyCol{m.Name, textField(func(i int) string { return levels[codes[i]] })})
		} else {
			cohort = append(cohort, copyCol{m.Name, floatField(cv.Values)})
		}
	}
	outcomes := map[string][]float64{}
	for _, oc := range c.Outcomes {
		outcomes[oc.Name] = oc.Values
	}
	for _, name := range out.Outcomes {
		cohort = append(cohort, copyCol{name, floatField(outcomes[name])})
	}
	if err := w.copyRows(ctx, o.C.Schema, o.C.Cohort.Name, cohort, c.N()); err != nil {
		return err
	}
	if err := w.step("cohort"); err != nil {
		return err
	}

	treated := copyCol{"treated", boolField(c.Treated)}
	scores := []copyCol{run, {out.Unit, unit}, treated,
		{"ps", floatField(p.PS)}, {"logit_ps", floatField(p.LogitPS)}, {"in_support", boolField(p.InSupport)}}
	if err := w.copyRows(ctx, o.C.Schema, o.C.Scores.Name, scores, c.N()); err != nil {
		return err
	}
	if err := w.step("scores"); err != nil {
		return err
	}

	if err := w.copyMatches(ctx, o, out, p); err != nil {
		return err
	}
	if err := w.step("matches"); err != nil {
		return err
	}

	weights := []copyCol{run, {out.Unit, unit}, treated}
	for k, s := range out.Schemes {
		weights = append(weights, copyCol{s, floatField(p.Weights[k])})
	}
	if err := w.copyRows(ctx, o.C.Schema, o.C.Weights.Name, weights, c.N()); err != nil {
		return err
	}
	return w.step("weights")
}

// copyMatches writes p's match rows; their unit ids come from p.Cohort.
func (w *Warehouse) copyMatches(ctx context.Context, o *warehouse.Objects, out warehouse.Output, p *warehouse.Publication) error {
	m := p.Matches
	if m.Len() == 0 {
		return nil
	}
	c := p.Cohort
	var matchUnit field
	if c.IDKind == warehouse.IDInt {
		matchUnit = int64Field(func(i int) int64 { return c.IntIDs[m.Unit[i]] })
	} else {
		matchUnit = textField(func(i int) string { return c.TextIDs[m.Unit[i]] })
	}
	matches := []copyCol{{"run_id", constText(p.Run.RunID)},
		{"set_id", int64Field(func(i int) int64 { return m.SetID[i] })},
		{out.Unit, matchUnit},
		{"treated", boolField(m.Treated)},
		{"set_weight", floatField(m.SetWeight)},
		{"match_distance", floatField(m.Distance)},
	}
	return w.copyRows(ctx, o.C.Schema, o.C.Matches.Name, matches, m.Len())
}
