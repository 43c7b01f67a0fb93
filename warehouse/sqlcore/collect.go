package sqlcore

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"counterpart/warehouse"
)

// Class groups result column types by how counterpart may use them.
type Class int

const (
	ClassInt     Class = iota // any integer type
	ClassFloat                // float4/8, REAL, DOUBLE
	ClassDecimal              // DECIMAL, numeric
	ClassBool                 // boolean
	ClassText                 // text types and enums
	ClassDate                 // DATE
	ClassNull                 // the type of a bare NULL
	ClassOther                // anything else: refused
)

func (c Class) numeric() bool {
	return c == ClassInt || c == ClassFloat || c == ClassDecimal || c == ClassNull
}

// Column is one result column: its name, type name (for messages) and
// class.
type Column struct {
	Name, Type string
	Class      Class
}

// Sink receives one column's values, one call per row, from an engine's
// value decoding. The collector behind it knows the column's role and
// applies every rule of warehouse.CohortQuery.
type Sink interface {
	Null()
	Bool(b bool)
	Int(x int64)
	Float(f float64)
	// Exact is a number no int64 or float64 holds exactly (DECIMAL,
	// numeric, a wide integer): its nearest double and its text; wide is
	// true for an integer outside the int64 range.
	Exact(f float64, text string, wide bool)
	// Text may be a view of the driver's buffer: sinks copy what they keep.
	Text(s string)
	// Date is days since 1970-01-01 (±Inf for infinite dates).
	Date(days float64)
}

// role of a collected column.
type role int

const (
	roleIntID role = iota
	roleTextID
	roleTreat
	roleNum
	roleCat
)

// col collects one used column. Codes of a categorical column are in
// order of first appearance while scanning; finish sorts the levels.
type col struct {
	role      role
	name      string
	ids       []int64
	texts     []string
	treated   []bool
	vals      []float64
	codes     []int32
	nulls     int
	nonFinite int
	firstBad  int
	bad       int // treatment values not 0/1, ids outside int64
	badRow    int
	badValue  string
	unexpect  string

	textKeys  map[string]int32
	intKeys   map[int64]int32
	floatKeys map[float64]int32
	levels    []string
}

func (c *col) n() int {
	switch c.role {
	case roleIntID:
		return len(c.ids)
	case roleTextID:
		return len(c.texts)
	case roleTreat:
		return len(c.treated)
	case roleNum:
		return len(c.vals)
	}
	return len(c.codes)
}

func (c *col) Null() {
	c.nulls++
	switch c.role {
	case roleIntID:
		c.ids = append(c.ids, 0)
	case roleTextID:
		c.texts = append(c.texts, "")
	case roleTreat:
		c.treated = append(c.treated, false)
	case roleNum:
		c.vals = append(c.vals, math.NaN())
	default:
		c.codes = append(c.codes, 0)
	}
}

func (c *col) Bool(b bool) {
	switch c.role {
	case roleTreat:
		c.treated = append(c.treated, b)
	case roleCat:
		c.codes = append(c.codes, c.textCode(strconv.FormatBool(b)))
	default:
		c.number(b2f(b), strconv.FormatBool(b))
	}
}

func b2f(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

func (c *col) Int(x int64) {
	switch c.role {
	case roleIntID:
		c.ids = append(c.ids, x)
	case roleCat:
		c.codes = append(c.codes, c.intCode(x, strconv.FormatInt(x, 10)))
	default:
		c.number(float64(x), strconv.FormatInt(x, 10))
	}
}

func (c *col) Float(f float64) {
	if c.role == roleCat {
		if math.IsNaN(f) || math.IsInf(f, 0) {
			c.codes = append(c.codes, c.badCode())
			return
		}
		code, ok := c.floatKeys[f]
		if !ok {
			if c.floatKeys == nil {
				c.floatKeys = map[float64]int32{}
			}
			code = c.newLevel(strconv.FormatFloat(f, 'g', -1, 64))
			c.floatKeys[f] = code
		}
		c.codes = append(c.codes, code)
		return
	}
	c.number(f, strconv.FormatFloat(f, 'g', -1, 64))
}

func (c *col) Exact(f float64, text string, wide bool) {
	switch {
	case c.role == roleIntID && wide:
		if c.bad == 0 {
			c.badValue = strings.Clone(text)
		}
		c.bad++
		c.ids = append(c.ids, 0)
	case c.role == roleCat && (math.IsNaN(f) || math.IsInf(f, 0)):
		c.codes = append(c.codes, c.badCode())
	case c.role == roleCat:
		c.codes = append(c.codes, c.textCode(text))
	default:
		c.number(f, text)
	}
}

func (c *col) Text(s string) {
	switch c.role {
	case roleTextID:
		c.texts = append(c.texts, strings.Clone(s))
	case roleCat:
		c.codes = append(c.codes, c.textCode(s))
	default:
		c.unexpected("text")
	}
}

func (c *col) Date(days float64) {
	if c.role != roleCat {
		c.number(days, "")
		return
	}
	if math.IsInf(days, 0) {
		c.codes = append(c.codes, c.badCode())
		return
	}
	x := int64(days)
	if code, ok := c.intKeys[x]; ok {
		c.codes = append(c.codes, code)
		return
	}
	c.codes = append(c.codes, c.intCode(x, time.Unix(x*86400, 0).UTC().Format(time.DateOnly)))
}

// number appends a numeric value to a treatment, numeric covariate or
// outcome; text shows it in a message.
func (c *col) number(f float64, text string) {
	switch c.role {
	case roleTreat:
		if f != 0 && f != 1 {
			if c.bad == 0 {
				c.badRow, c.badValue = len(c.treated), strings.Clone(text)
			}
			c.bad++
		}
		c.treated = append(c.treated, f == 1)
	case roleNum:
		if math.IsNaN(f) || math.IsInf(f, 0) {
			if c.nonFinite == 0 {
				c.firstBad = len(c.vals)
			}
			c.nonFinite++
		}
		c.vals = append(c.vals, f)
	default:
		c.unexpected("a number")
	}
}

func (c *col) unexpected(what string) {
	if c.unexpect == "" {
		c.unexpect = fmt.Sprintf("unexpected %s in column %s", what, c.name)
	}
	c.Null()
	c.nulls--
}

func (c *col) newLevel(s string) int32 {
	c.levels = append(c.levels, s)
	return int32(len(c.levels) - 1)
}

func (c *col) textCode(s string) int32 {
	if code, ok := c.textKeys[s]; ok { // no allocation: map look-up
		return code
	}
	if c.textKeys == nil {
		c.textKeys = map[string]int32{}
	}
	s = strings.Clone(s)
	code := c.newLevel(s)
	c.textKeys[s] = code
	return code
}

func (c *col) intCode(x int64, text string) int32 {
	if code, ok := c.intKeys[x]; ok {
		return code
	}
	if c.intKeys == nil {
		c.intKeys = map[int64]int32{}
	}
	code := c.newLevel(text)
	c.intKeys[x] = code
	return code
}

func (c *col) badCode() int32 {
	if c.nonFinite == 0 {
		c.firstBad = len(c.codes)
	}
	c.nonFinite++
	return 0
}

// Collector decodes the analyst's query into a Cohort, whatever the
// engine: one col per used column.
type Collector struct {
	q     warehouse.CohortQuery
	sinks []Sink
	unit  *col
	treat *col
	covs  []*col
	outs  []*col
}

// NewCollector checks the result columns against q (names, types) and
// sets up a sink for each used column.
func NewCollector(q warehouse.CohortQuery, cols []Column) (*Collector, error) {
	names := make([]string, len(cols))
	for i, c := range cols {
		names[i] = c.Name
	}
	k := &Collector{q: q, sinks: make([]Sink, len(cols))}
	find := func(want, r string) (int, Column, error) {
		i, err := warehouse.FindColumn(names, want, r)
		if err != nil {
			return 0, Column{}, err
		}
		if k.sinks[i] != nil {
			return 0, Column{}, fmt.Errorf("%w: cohort.sql column %s has two roles", warehouse.ErrBadInput, want)
		}
		return i, cols[i], nil
	}
	use := func(i int, r role, name string) *col {
		c := &col{role: r, name: name}
		k.sinks[i] = c
		return c
	}
	i, ut, err := find(q.Unit, "unit")
	if err != nil {
		return nil, err
	}
	switch ut.Class {
	case ClassInt:
		k.unit = use(i, roleIntID, q.Unit)
	case ClassText:
		k.unit = use(i, roleTextID, q.Unit)
	default:
		return nil, fmt.Errorf("%w: unit column %s has type %s; the unit must be an integer or text column — cast it in cohort.sql", warehouse.ErrBadInput, q.Unit, ut.Type)
	}
	i, tt, err := find(q.Treatment, "treatment")
	if err != nil {
		return nil, err
	}
	if tt.Class != ClassBool && !tt.Class.numeric() {
		return nil, fmt.Errorf("%w: treatment column %s has type %s; it must be boolean or 0/1 — for example select (arm = 'coached') as %s", warehouse.ErrBadInput, q.Treatment, tt.Type, q.Treatment)
	}
	k.treat = use(i, roleTreat, q.Treatment)
	for _, name := range q.Covariates {
		i, ct, err := find(name, "covariate")
		if err != nil {
			return nil, err
		}
		switch {
		case ct.Class == ClassOther:
			return nil, fmt.Errorf("%w: covariate column %s has type %s, which counterpart cannot use; cast it to a number or text in cohort.sql", warehouse.ErrBadInput, name, ct.Type)
		case ct.Class == ClassBool || ct.Class == ClassText || warehouse.CategoricalOf(q, name):
			k.covs = append(k.covs, use(i, roleCat, name))
		default:
			k.covs = append(k.covs, use(i, roleNum, name))
		}
	}
	for _, name := range q.Outcomes {
		i, ot, err := find(name, "outcome")
		if err != nil {
			return nil, err
		}
		if ot.Class != ClassBool && !ot.Class.numeric() {
			return nil, fmt.Errorf("%w: outcome column %s has type %s; outcomes must be numeric or boolean", warehouse.ErrBadInput, name, ot.Type)
		}
		k.outs = append(k.outs, use(i, roleNum, name))
	}
	return k, nil
}

// Sinks returns one sink per result column, nil for unused ones.
func (k *Collector) Sinks() []Sink { return k.sinks }

// Rows is the number of rows collected so far.
func (k *Collector) Rows() int { return k.treat.n() }

// Finish checks the decoded columns (NULLs, treatment values, non-finite
// numbers, duplicate units) and assembles the Cohort.
func (k *Collector) Finish() (*warehouse.Cohort, error) {
	q := k.q
	all := append(append([]*col{k.unit, k.treat}, k.covs...), k.outs...)
	for _, c := range all {
		if c.unexpect != "" {
			return nil, fmt.Errorf("cohort.sql: %s", c.unexpect)
		}
	}
	if k.Rows() == 0 {
		return nil, fmt.Errorf("%w: cohort.sql returned no rows", warehouse.ErrBadInput)
	}
	c := &warehouse.Cohort{Unit: q.Unit, Treatment: q.Treatment, IntIDs: k.unit.ids, TextIDs: k.unit.texts, Treated: k.treat.treated}
	unit := func(row int) string { return strconv.FormatInt(k.unit.ids[row], 10) }
	if k.unit.role == roleTextID {
		c.IDKind = warehouse.IDText
		unit = func(row int) string { return strconv.Quote(k.unit.texts[row]) }
	}
	var nulls []string
	for _, cc := range all[:2+len(k.covs)] {
		if cc.nulls > 0 {
			nulls = append(nulls, fmt.Sprintf("column %s has %s", cc.name, warehouse.Plural(cc.nulls, "NULL value")))
		}
	}
	if len(nulls) > 0 {
		return nil, fmt.Errorf("%w: %s; the cohort must have none — filter or impute in cohort.sql", warehouse.ErrBadInput, strings.Join(nulls, " and "))
	}
	if u := k.unit; u.bad > 0 {
		return nil, fmt.Errorf("%w: unit column %s has %s outside the 64-bit integer range (for example %s); cast it to VARCHAR in cohort.sql",
			warehouse.ErrBadInput, q.Unit, warehouse.Plural(u.bad, "value"), u.badValue)
	}
	if t := k.treat; t.bad > 0 {
		return nil, fmt.Errorf("%w: treatment column %s has %s other than 0 and 1 (for example %s at unit %s); it must be boolean or 0/1",
			warehouse.ErrBadInput, q.Treatment, warehouse.Plural(t.bad, "value"), t.badValue, unit(t.badRow))
	}
	for _, cc := range all[2:] {
		if cc.nonFinite > 0 {
			return nil, fmt.Errorf("%w: column %s has %s (for example at unit %s); replace or filter them in cohort.sql",
				warehouse.ErrBadInput, cc.name, warehouse.Plural(cc.nonFinite, "NaN or infinite value"), unit(cc.firstBad))
		}
	}
	for _, cc := range k.covs {
		cv := warehouse.Covariate{Name: cc.name, Values: cc.vals}
		if cc.role == roleCat {
			cv.Kind, cv.Values = warehouse.Categorical, nil
			cv.Codes = cc.codes
			if len(cc.levels) > 0 {
				levels, remap := warehouse.LevelOrder(cc.levels)
				for i, code := range cc.codes {
					cc.codes[i] = remap[code]
				}
				cv.Levels = levels
			}
		}
		c.Covariates = append(c.Covariates, cv)
	}
	for _, o := range k.outs {
		c.Outcomes = append(c.Outcomes, warehouse.Outcome{Name: o.name, Values: o.vals, Kind: warehouse.ClassifyOutcome(o.vals)})
	}
	if err := warehouse.CanonicalOrder(c); err != nil {
		return nil, err
	}
	return c, nil
}
