package postgres

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
	"unsafe"

	"github.com/jackc/pgx/v5/pgconn"

	"counterpart/warehouse"
)

// class groups column types by how counterpart may use them; the same
// classes as the DuckDB engine's.
type class int

const (
	clsInt     class = iota // int2, int4, int8
	clsFloat                // float4, float8
	clsDecimal              // numeric
	clsBool                 // boolean
	clsText                 // text, varchar, char, name, enum
	clsDate                 // date
	clsOther                // anything else: refused
)

func (c class) numeric() bool { return c == clsInt || c == clsFloat || c == clsDecimal }

// kind is the wire encoding of a column's values.
type kind int

const (
	kInt2    kind = iota // binary, 2 bytes big-endian
	kInt4                // binary, 4 bytes
	kInt8                // binary, 8 bytes
	kFloat4              // binary IEEE 754 single
	kFloat8              // binary IEEE 754 double
	kNumeric             // text: the decimal digits
	kBool                // binary, 1 byte
	kText                // binary = the UTF-8 bytes
	kEnum                // text = the label
	kDate                // binary, int32 days since 2000-01-01
	kOther               // text, never decoded
)

// Format codes of the extended query protocol.
const (
	textFormat   int16 = 0
	binaryFormat int16 = 1
)

// format is the result format the engine asks for: binary where decoding
// it is a few byte reads, text for numeric (its binary form is base-10000
// digits; the text parses straight to the nearest double) and for types
// whose binary form is not decoded.
func (k kind) format() int16 {
	switch k {
	case kNumeric, kEnum, kOther:
		return textFormat
	}
	return binaryFormat
}

// builtin maps the OIDs of built-in types (pg_type.dat; stable across
// releases) to their class and wire kind.
var builtin = map[uint32]pgType{
	16:   {"boolean", clsBool, kBool},
	20:   {"bigint", clsInt, kInt8},
	21:   {"smallint", clsInt, kInt2},
	23:   {"integer", clsInt, kInt4},
	700:  {"real", clsFloat, kFloat4},
	701:  {"double precision", clsFloat, kFloat8},
	1700: {"numeric", clsDecimal, kNumeric},
	25:   {"text", clsText, kText},
	1043: {"character varying", clsText, kText},
	1042: {"character", clsText, kText},
	19:   {"name", clsText, kText},
	705:  {"unknown", clsText, kText},
	1082: {"date", clsDate, kDate},
}

// Days from 1970-01-01 to 2000-01-01, the epoch of Postgres dates.
const pgEpochDays = 10957

// intVal reads a binary integer.
func intVal(k kind, b []byte) (int64, error) {
	switch {
	case k == kInt8 && len(b) == 8:
		return int64(binary.BigEndian.Uint64(b)), nil
	case k == kInt4 && len(b) == 4:
		return int64(int32(binary.BigEndian.Uint32(b))), nil
	case k == kInt2 && len(b) == 2:
		return int64(int16(binary.BigEndian.Uint16(b))), nil
	}
	return 0, fmt.Errorf("unexpected %d-byte integer value", len(b))
}

// floatVal converts a numeric, boolean or date wire value to float64. A
// date becomes days since 1970-01-01, ±infinity an infinite value.
func floatVal(k kind, b []byte) (float64, error) {
	switch k {
	case kInt2, kInt4, kInt8:
		x, err := intVal(k, b)
		return float64(x), err
	case kFloat8:
		if len(b) == 8 {
			return math.Float64frombits(binary.BigEndian.Uint64(b)), nil
		}
	case kFloat4:
		if len(b) == 4 {
			return float64(math.Float32frombits(binary.BigEndian.Uint32(b))), nil
		}
	case kNumeric:
		return numericVal(b)
	case kBool:
		if len(b) == 1 {
			if b[0] != 0 {
				return 1, nil
			}
			return 0, nil
		}
	case kDate:
		if len(b) == 4 {
			switch d := int32(binary.BigEndian.Uint32(b)); d {
			case math.MaxInt32:
				return math.Inf(1), nil
			case math.MinInt32:
				return math.Inf(-1), nil
			default:
				return float64(int64(d) + pgEpochDays), nil
			}
		}
	}
	return 0, fmt.Errorf("unexpected %d-byte value for a number", len(b))
}

// numericVal parses numeric's text form ("-12.50", "NaN", "Infinity") to
// the nearest float64 (strconv.ParseFloat rounds correctly); a value
// beyond the double range becomes ±Inf and is refused later as
// non-finite.
func numericVal(b []byte) (float64, error) {
	f, err := strconv.ParseFloat(bytesString(b), 64)
	if err != nil && !errors.Is(err, strconv.ErrRange) {
		return 0, fmt.Errorf("numeric value %q: %w", b, err)
	}
	return f, nil
}

// bytesString views b as a string without copying, for parsing and map
// look-ups; the result must not outlive b.
func bytesString(b []byte) string {
	if len(b) == 0 {
		return ""
	}
	return unsafe.String(&b[0], len(b))
}

// valueText is a value as an error message shows it.
func valueText(k kind, b []byte) string {
	switch k {
	case kNumeric, kText, kEnum:
		return string(b)
	case kBool:
		return strconv.FormatBool(len(b) == 1 && b[0] != 0)
	}
	f, err := floatVal(k, b)
	if err != nil {
		return "?"
	}
	return strconv.FormatFloat(f, 'g', -1, 64)
}

// scanner receives one column's raw values; nil b is NULL.
type scanner interface{ scan(b []byte) error }

// decoder holds one scanner per used column.
type decoder struct {
	q       warehouse.CohortQuery
	formats []int16
	cols    []scanner
	n       int

	intIDs  *intIDCol
	textIDs *textIDCol
	treat   *treatCol
	covs    []covDec
	outs    []*numCol
	idKind  warehouse.IDKind
}

type covDec struct {
	num *numCol
	cat *catCol
}

// newDecoder checks the result columns against q (names, types) and sets
// up a scanner for each used column.
func newDecoder(q warehouse.CohortQuery, fields []pgconn.FieldDescription, types []pgType) (*decoder, error) {
	names := make([]string, len(fields))
	d := &decoder{q: q, formats: make([]int16, len(fields)), cols: make([]scanner, len(fields))}
	for i, f := range fields {
		names[i] = f.Name
		d.formats[i] = types[i].kind.format()
	}
	col := func(want, role string) (int, pgType, error) {
		i, err := warehouse.FindColumn(names, want, role)
		if err != nil {
			return 0, pgType{}, err
		}
		return i, types[i], nil
	}

	ui, ut, err := col(q.Unit, "unit")
	if err != nil {
		return nil, err
	}
	switch ut.cls {
	case clsInt:
		d.idKind = warehouse.IDInt
		d.intIDs = &intIDCol{k: ut.kind}
		d.cols[ui] = d.intIDs
	case clsText:
		d.idKind = warehouse.IDText
		d.textIDs = &textIDCol{}
		d.cols[ui] = d.textIDs
	default:
		return nil, fmt.Errorf("%w: unit column %s has type %s; the unit must be an integer or text column — cast it in cohort.sql", warehouse.ErrBadInput, q.Unit, ut.name)
	}

	ti, tt, err := col(q.Treatment, "treatment")
	if err != nil {
		return nil, err
	}
	if tt.cls != clsBool && !tt.cls.numeric() {
		return nil, fmt.Errorf("%w: treatment column %s has type %s; it must be boolean or 0/1 — for example select (arm = 'coached') as %s", warehouse.ErrBadInput, q.Treatment, tt.name, q.Treatment)
	}
	if d.cols[ti] != nil {
		return nil, fmt.Errorf("%w: cohort.sql column %s is both unit and treatment", warehouse.ErrBadInput, q.Treatment)
	}
	d.treat = &treatCol{k: tt.kind}
	d.cols[ti] = d.treat

	categorical := map[string]bool{}
	for _, name := range q.Categorical {
		categorical[strings.ToLower(name)] = true
	}
	d.covs = make([]covDec, len(q.Covariates))
	for k, name := range q.Covariates {
		i, ct, err := col(name, "covariate")
		if err != nil {
			return nil, err
		}
		switch {
		case ct.cls == clsOther:
			return nil, fmt.Errorf("%w: covariate column %s has type %s, which counterpart cannot use; cast it to a number or text in cohort.sql", warehouse.ErrBadInput, name, ct.name)
		case ct.cls == clsBool || ct.cls == clsText || categorical[strings.ToLower(name)]:
			d.covs[k].cat = &catCol{k: ct.kind}
			d.cols[i] = d.covs[k].cat
		default:
			d.covs[k].num = &numCol{k: ct.kind}
			d.cols[i] = d.covs[k].num
		}
	}
	d.outs = make([]*numCol, len(q.Outcomes))
	for k, name := range q.Outcomes {
		i, ot, err := col(name, "outcome")
		if err != nil {
			return nil, err
		}
		if ot.cls != clsBool && !ot.cls.numeric() {
			return nil, fmt.Errorf("%w: outcome column %s has type %s; outcomes must be numeric or boolean", warehouse.ErrBadInput, name, ot.name)
		}
		d.outs[k] = &numCol{k: ot.kind}
		d.cols[i] = d.outs[k]
	}
	return d, nil
}

// row appends one row's values.
func (d *decoder) row(vals [][]byte) error {
	d.n++
	if len(vals) != len(d.cols) {
		return fmt.Errorf("%d values for %d columns", len(vals), len(d.cols))
	}
	for i, s := range d.cols {
		if s != nil {
			if err := s.scan(vals[i]); err != nil {
				return err
			}
		}
	}
	return nil
}

// finish checks the decoded columns (NULLs, treatment values, non-finite
// numbers, duplicate units) and assembles the Cohort.
func (d *decoder) finish() (*warehouse.Cohort, error) {
	q := d.q
	if d.n == 0 {
		return nil, fmt.Errorf("%w: cohort.sql returned no rows", warehouse.ErrBadInput)
	}
	c := &warehouse.Cohort{Unit: q.Unit, Treatment: q.Treatment, IDKind: d.idKind}
	var nulls []string
	var checks []func(unit func(int) string) error
	unit := func(row int) string {
		if d.intIDs != nil {
			return strconv.FormatInt(d.intIDs.vals[row], 10)
		}
		return strconv.Quote(d.textIDs.vals[row])
	}
	countNulls := func(name string, k int) {
		if k > 0 {
			nulls = append(nulls, fmt.Sprintf("column %s has %s", name, warehouse.Plural(k, "NULL value")))
		}
	}
	if d.intIDs != nil {
		countNulls(q.Unit, d.intIDs.nulls)
		c.IntIDs = d.intIDs.vals
	} else {
		countNulls(q.Unit, d.textIDs.nulls)
		c.TextIDs = d.textIDs.vals
	}
	treat := d.treat
	countNulls(q.Treatment, treat.nulls)
	c.Treated = treat.vals
	checks = append(checks, func(unit func(int) string) error {
		if treat.bad > 0 {
			return fmt.Errorf("%w: treatment column %s has %s other than 0 and 1 (for example %s at unit %s); it must be boolean or 0/1",
				warehouse.ErrBadInput, q.Treatment, warehouse.Plural(treat.bad, "value"), treat.badValue, unit(treat.badRow))
		}
		return nil
	})
	for k, name := range q.Covariates {
		cv := warehouse.Covariate{Name: name}
		if num := d.covs[k].num; num != nil {
			countNulls(name, num.nulls)
			checks = append(checks, finiteCheck(name, num.nonFinite, num.firstBad))
			cv.Kind, cv.Values = warehouse.Numeric, num.vals
		} else {
			cat := d.covs[k].cat
			countNulls(name, cat.nulls)
			checks = append(checks, finiteCheck(name, cat.nonFinite, cat.firstBad))
			cv.Kind = warehouse.Categorical
			cv.Levels, cv.Codes = cat.finish()
		}
		c.Covariates = append(c.Covariates, cv)
	}
	for k, name := range q.Outcomes {
		o := d.outs[k]
		checks = append(checks, finiteCheck(name, o.nonFinite, o.firstBad))
		c.Outcomes = append(c.Outcomes, warehouse.Outcome{Name: name, Values: o.vals, Binary: o.binary()})
	}
	if len(nulls) > 0 {
		return nil, fmt.Errorf("%w: %s; the cohort must have none — filter or impute in cohort.sql", warehouse.ErrBadInput, strings.Join(nulls, " and "))
	}
	for _, check := range checks {
		if err := check(unit); err != nil {
			return nil, err
		}
	}
	if err := warehouse.CheckUnique(c); err != nil {
		return nil, err
	}
	return c, nil
}

// finiteCheck refuses NaN and infinities stored in the data: NaN would be
// mistaken for NULL and an infinity breaks every mean.
func finiteCheck(name string, count, first int) func(func(int) string) error {
	return func(unit func(int) string) error {
		if count > 0 {
			return fmt.Errorf("%w: column %s has %s (for example at unit %s); replace or filter them in cohort.sql",
				warehouse.ErrBadInput, name, warehouse.Plural(count, "NaN or infinite value"), unit(first))
		}
		return nil
	}
}

// intIDCol collects an integer unit column as int64.
type intIDCol struct {
	k     kind
	vals  []int64
	nulls int
}

func (c *intIDCol) scan(b []byte) error {
	if b == nil {
		c.nulls++
		c.vals = append(c.vals, 0)
		return nil
	}
	x, err := intVal(c.k, b)
	c.vals = append(c.vals, x)
	return err
}

// textIDCol collects a text unit column.
type textIDCol struct {
	vals  []string
	nulls int
}

func (c *textIDCol) scan(b []byte) error {
	if b == nil {
		c.nulls++
	}
	c.vals = append(c.vals, string(b))
	return nil
}

// treatCol collects the treatment: a boolean, or a number equal to 0 or 1.
type treatCol struct {
	k        kind
	vals     []bool
	nulls    int
	bad      int
	badRow   int
	badValue string
}

func (c *treatCol) scan(b []byte) error {
	if b == nil {
		c.nulls++
		c.vals = append(c.vals, false)
		return nil
	}
	f, err := floatVal(c.k, b)
	if err != nil {
		return err
	}
	if f != 0 && f != 1 {
		if c.bad == 0 {
			c.badRow, c.badValue = len(c.vals), valueText(c.k, b)
		}
		c.bad++
	}
	c.vals = append(c.vals, f == 1)
	return nil
}

// numCol collects a numeric covariate or an outcome as float64; NULL
// becomes NaN (an error for a covariate, missing for an outcome).
type numCol struct {
	k         kind
	vals      []float64
	nulls     int
	nonFinite int
	firstBad  int
}

func (c *numCol) scan(b []byte) error {
	if b == nil {
		c.nulls++
		c.vals = append(c.vals, math.NaN())
		return nil
	}
	f, err := floatVal(c.k, b)
	if err != nil {
		return err
	}
	if math.IsNaN(f) || math.IsInf(f, 0) {
		if c.nonFinite == 0 {
			c.firstBad = len(c.vals)
		}
		c.nonFinite++
	}
	c.vals = append(c.vals, f)
	return nil
}

// binary reports whether every non-NULL value is 0 or 1 (and there is one).
func (c *numCol) binary() bool {
	seen := false
	for _, v := range c.vals {
		if math.IsNaN(v) {
			continue
		}
		if v != 0 && v != 1 {
			return false
		}
		seen = true
	}
	return seen
}

// catCol collects a categorical covariate: codes in order of first
// appearance while scanning, levels sorted by finish. Values are keyed by
// their wire bytes or number, and a level's text is made once per level,
// not once per row.
type catCol struct {
	k         kind
	codes     []int32
	text      map[string]int32
	ints      map[int64]int32
	floats    map[float64]int32
	levels    []string // in code order
	nulls     int
	nonFinite int
	firstBad  int
}

func (c *catCol) scan(b []byte) error {
	if b == nil {
		c.nulls++
		c.codes = append(c.codes, 0)
		return nil
	}
	var code int32
	switch c.k {
	case kText, kEnum, kOther:
		code = c.textCode(b)
	case kBool:
		if len(b) != 1 {
			return fmt.Errorf("unexpected %d-byte boolean", len(b))
		}
		code = c.textCode(boolText[b[0] != 0])
	case kInt2, kInt4, kInt8:
		x, err := intVal(c.k, b)
		if err != nil {
			return err
		}
		code = c.intCode(x, strconv.FormatInt)
	case kDate:
		f, err := floatVal(c.k, b)
		if err != nil {
			return err
		}
		if math.IsInf(f, 0) {
			code = c.badCode()
			break
		}
		code = c.intCode(int64(f), dateText)
	case kNumeric:
		f, err := numericVal(b)
		if err != nil {
			return err
		}
		if math.IsNaN(f) || math.IsInf(f, 0) {
			code = c.badCode()
			break
		}
		code = c.textCode(b)
	default: // floats
		f, err := floatVal(c.k, b)
		if err != nil {
			return err
		}
		code = c.floatCode(f)
	}
	c.codes = append(c.codes, code)
	return nil
}

var boolText = map[bool][]byte{false: []byte("false"), true: []byte("true")}

// dateText formats days since 1970-01-01 as an ISO date.
func dateText(days int64, _ int) string {
	return time.Unix(days*86400, 0).UTC().Format(time.DateOnly)
}

func (c *catCol) textCode(b []byte) int32 {
	if code, ok := c.text[string(b)]; ok { // no allocation: map look-up
		return code
	}
	if c.text == nil {
		c.text = map[string]int32{}
	}
	s := string(b)
	code := int32(len(c.levels))
	c.text[s] = code
	c.levels = append(c.levels, s)
	return code
}

func (c *catCol) intCode(x int64, format func(int64, int) string) int32 {
	if code, ok := c.ints[x]; ok {
		return code
	}
	if c.ints == nil {
		c.ints = map[int64]int32{}
	}
	code := int32(len(c.levels))
	c.ints[x] = code
	c.levels = append(c.levels, format(x, 10))
	return code
}

func (c *catCol) badCode() int32 {
	if c.nonFinite == 0 {
		c.firstBad = len(c.codes)
	}
	c.nonFinite++
	return 0
}

func (c *catCol) floatCode(x float64) int32 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return c.badCode()
	}
	if code, ok := c.floats[x]; ok {
		return code
	}
	if c.floats == nil {
		c.floats = map[float64]int32{}
	}
	code := int32(len(c.levels))
	c.floats[x] = code
	c.levels = append(c.levels, strconv.FormatFloat(x, 'g', -1, 64))
	return code
}

// finish sorts the levels and renumbers the codes so that Levels[0], the
// reference level, is the smallest.
func (c *catCol) finish() ([]string, []int32) {
	if len(c.levels) == 0 {
		return nil, c.codes
	}
	levels, remap := warehouse.LevelOrder(c.levels)
	for i, code := range c.codes {
		c.codes[i] = remap[code]
	}
	return levels, c.codes
}
