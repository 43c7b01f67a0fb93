package duckdb

import (
	"database/sql"
	"fmt"
	"math"
	"math/big"
	"strconv"
	"strings"
	"time"

	duckdb "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
)

// class groups DuckDB column types by how counterpart may use them.
type class int

const (
	clsInt     class = iota // TINYINT .. HUGEINT, UTINYINT .. UHUGEINT
	clsFloat                // FLOAT, DOUBLE
	clsDecimal              // DECIMAL(p,s)
	clsBool                 // BOOLEAN
	clsText                 // VARCHAR, ENUM
	clsDate                 // DATE
	clsNull                 // the type of a bare NULL
	clsOther                // anything else: refused
)

// classOf reads a result column's DuckDB type name (ColumnTypes'
// DatabaseTypeName).
func classOf(dbType string) class {
	switch dbType {
	case "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT",
		"UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT", "UHUGEINT":
		return clsInt
	case "FLOAT", "DOUBLE":
		return clsFloat
	case "BOOLEAN":
		return clsBool
	case "VARCHAR", "ENUM":
		return clsText
	case "DATE":
		return clsDate
	case "SQLNULL":
		return clsNull
	}
	if strings.HasPrefix(dbType, "DECIMAL") {
		return clsDecimal
	}
	return clsOther
}

func (c class) numeric() bool {
	return c == clsInt || c == clsFloat || c == clsDecimal || c == clsNull
}

// decode scans rows into a Cohort. Each used column gets one Scanner that
// appends straight into its column slice, so a row costs no allocation
// beyond the driver's own; unused columns are skipped.
func decode(rows *sql.Rows, q warehouse.CohortQuery) (*warehouse.Cohort, error) {
	cts, err := rows.ColumnTypes()
	if err != nil {
		return nil, fmt.Errorf("cohort.sql: column types: %w", queryError(err))
	}
	names := make([]string, len(cts))
	types := make([]string, len(cts))
	dest := make([]any, len(cts))
	for i, ct := range cts {
		names[i], types[i] = ct.Name(), ct.DatabaseTypeName()
		dest[i] = skipCol{}
	}
	col := func(want, role string) (int, class, error) {
		i, err := warehouse.FindColumn(names, want, role)
		if err != nil {
			return 0, 0, err
		}
		return i, classOf(types[i]), nil
	}

	c := &warehouse.Cohort{Unit: q.Unit, Treatment: q.Treatment}
	// checks run in column order once the rows are read.
	var nulls []string
	var checks []func(unit func(int) string) error

	ui, ucls, err := col(q.Unit, "unit")
	if err != nil {
		return nil, err
	}
	var intIDs *intIDCol
	var textIDs *textIDCol
	switch ucls {
	case clsInt:
		c.IDKind = warehouse.IDInt
		intIDs = &intIDCol{}
		dest[ui] = intIDs
	case clsText:
		c.IDKind = warehouse.IDText
		textIDs = &textIDCol{}
		dest[ui] = textIDs
	default:
		return nil, fmt.Errorf("%w: unit column %s has type %s; the unit must be an integer or text column — cast it in cohort.sql", warehouse.ErrBadInput, q.Unit, types[ui])
	}

	ti, tcls, err := col(q.Treatment, "treatment")
	if err != nil {
		return nil, err
	}
	if tcls != clsBool && !tcls.numeric() {
		return nil, fmt.Errorf("%w: treatment column %s has type %s; it must be boolean or 0/1 — for example select (arm = 'coached') as %s", warehouse.ErrBadInput, q.Treatment, types[ti], q.Treatment)
	}
	treat := &treatCol{}
	dest[ti] = treat

	categorical := map[string]bool{}
	for _, name := range q.Categorical {
		categorical[strings.ToLower(name)] = true
	}
	type covDec struct {
		num *numCol
		cat *catCol
	}
	covs := make([]covDec, len(q.Covariates))
	for k, name := range q.Covariates {
		i, cls, err := col(name, "covariate")
		if err != nil {
			return nil, err
		}
		switch {
		case cls == clsOther:
			return nil, fmt.Errorf("%w: covariate column %s has type %s, which counterpart cannot use; cast it to a number or text in cohort.sql", warehouse.ErrBadInput, name, types[i])
		case cls == clsBool || cls == clsText || categorical[strings.ToLower(name)]:
			covs[k].cat = &catCol{}
			dest[i] = covs[k].cat
		default:
			covs[k].num = &numCol{}
			dest[i] = covs[k].num
		}
	}
	outs := make([]*numCol, len(q.Outcomes))
	for k, name := range q.Outcomes {
		i, cls, err := col(name, "outcome")
		if err != nil {
			return nil, err
		}
		if cls != clsBool && !cls.numeric() {
			return nil, fmt.Errorf("%w: outcome column %s has type %s; outcomes must be numeric or boolean", warehouse.ErrBadInput, name, types[i])
		}
		outs[k] = &numCol{}
		dest[i] = outs[k]
	}

	n := 0
	for rows.Next() {
		if err := rows.Scan(dest...); err != nil {
			return nil, fmt.Errorf("cohort.sql: row %d: %w", n+1, err)
		}
		n++
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("cohort.sql: %w", queryError(err))
	}
	if n == 0 {
		return nil, fmt.Errorf("%w: cohort.sql returned no rows", warehouse.ErrBadInput)
	}

	// unit names a row in error messages.
	unit := func(row int) string {
		if intIDs != nil {
			return strconv.FormatInt(intIDs.vals[row], 10)
		}
		return strconv.Quote(textIDs.vals[row])
	}
	countNulls := func(name string, k int) {
		if k > 0 {
			nulls = append(nulls, fmt.Sprintf("column %s has %s", name, warehouse.Plural(k, "NULL value")))
		}
	}
	if intIDs != nil {
		countNulls(q.Unit, intIDs.nulls)
		c.IntIDs = intIDs.vals
		checks = append(checks, func(func(int) string) error {
			if intIDs.wide > 0 {
				return fmt.Errorf("%w: unit column %s has %s outside the 64-bit integer range (for example %s); cast it to VARCHAR in cohort.sql",
					warehouse.ErrBadInput, q.Unit, warehouse.Plural(intIDs.wide, "value"), intIDs.wideExample)
			}
			return nil
		})
	} else {
		countNulls(q.Unit, textIDs.nulls)
		c.TextIDs = textIDs.vals
	}
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
		if d := covs[k].num; d != nil {
			countNulls(name, d.nulls)
			checks = append(checks, d.finiteCheck(name))
			cv.Kind, cv.Values = warehouse.Numeric, d.vals
		} else {
			d := covs[k].cat
			countNulls(name, d.nulls)
			checks = append(checks, d.finiteCheck(name))
			cv.Kind = warehouse.Categorical
			cv.Levels, cv.Codes = d.finish()
		}
		c.Covariates = append(c.Covariates, cv)
	}
	for k, name := range q.Outcomes {
		d := outs[k]
		checks = append(checks, d.finiteCheck(name))
		c.Outcomes = append(c.Outcomes, warehouse.Outcome{Name: name, Values: d.vals, Binary: d.binary()})
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

// skipCol receives a column the study does not use.
type skipCol struct{}

func (skipCol) Scan(any) error { return nil }

// intIDCol collects an integer unit column as int64.
type intIDCol struct {
	vals        []int64
	nulls       int
	wide        int // values outside int64
	wideExample string
}

func (c *intIDCol) Scan(v any) error {
	var x int64
	switch t := v.(type) {
	case int64:
		x = t
	case int32:
		x = int64(t)
	case int16:
		x = int64(t)
	case int8:
		x = int64(t)
	case uint8:
		x = int64(t)
	case uint16:
		x = int64(t)
	case uint32:
		x = int64(t)
	case uint64:
		if t > math.MaxInt64 {
			c.wideValue(strconv.FormatUint(t, 10))
		}
		x = int64(t)
	case *big.Int:
		if !t.IsInt64() {
			c.wideValue(t.String())
		}
		x = t.Int64()
	case nil:
		c.nulls++
	default:
		return fmt.Errorf("unexpected %T for an integer unit", v)
	}
	c.vals = append(c.vals, x)
	return nil
}

func (c *intIDCol) wideValue(s string) {
	if c.wide == 0 {
		c.wideExample = s
	}
	c.wide++
}

// textIDCol collects a text unit column.
type textIDCol struct {
	vals  []string
	nulls int
}

func (c *textIDCol) Scan(v any) error {
	switch t := v.(type) {
	case string:
		c.vals = append(c.vals, t)
	case nil:
		c.nulls++
		c.vals = append(c.vals, "")
	default:
		return fmt.Errorf("unexpected %T for a text unit", v)
	}
	return nil
}

// treatCol collects the treatment: a boolean, or a number equal to 0 or 1.
type treatCol struct {
	vals     []bool
	nulls    int
	bad      int
	badRow   int
	badValue string
}

func (c *treatCol) Scan(v any) error {
	if b, ok := v.(bool); ok {
		c.vals = append(c.vals, b)
		return nil
	}
	f, ok, err := toFloat(v)
	switch {
	case err != nil:
		return err
	case !ok:
		c.nulls++
	case f != 0 && f != 1:
		if c.bad == 0 {
			c.badRow, c.badValue = len(c.vals), fmt.Sprint(v)
			if d, isDec := v.(duckdb.Decimal); isDec {
				c.badValue = d.String()
			}
		}
		c.bad++
	}
	c.vals = append(c.vals, f == 1)
	return nil
}

// numCol collects a numeric covariate or an outcome as float64; NULL
// becomes NaN (an error for a covariate, missing for an outcome).
type numCol struct {
	vals      []float64
	nulls     int
	nonFinite int
	firstBad  int
}

func (c *numCol) Scan(v any) error {
	f, ok, err := toFloat(v)
	if err != nil {
		return err
	}
	if !ok {
		c.nulls++
		c.vals = append(c.vals, math.NaN())
		return nil
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

// finiteCheck refuses NaN and infinities stored in the data: NaN would be
// mistaken for NULL and an infinity breaks every mean.
func (c *numCol) finiteCheck(name string) func(func(int) string) error {
	return func(unit func(int) string) error {
		if c.nonFinite > 0 {
			return fmt.Errorf("%w: column %s has %s (for example at unit %s); replace or filter them in cohort.sql",
				warehouse.ErrBadInput, name, warehouse.Plural(c.nonFinite, "NaN or infinite value"), unit(c.firstBad))
		}
		return nil
	}
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
// appearance while scanning, levels sorted by finish. Numbers are keyed by
// value and formatted once per level, not once per row.
type catCol struct {
	codes     []int32
	text      map[string]int32
	ints      map[int64]int32
	floats    map[float64]int32
	levels    []string // in code order
	nulls     int
	nonFinite int
	firstBad  int
}

func (c *catCol) Scan(v any) error {
	code := int32(0)
	switch t := v.(type) {
	case string:
		code = c.textCode(t)
	case bool:
		code = c.textCode(strconv.FormatBool(t))
	case int64:
		code = c.intCode(t)
	case int32:
		code = c.intCode(int64(t))
	case int16:
		code = c.intCode(int64(t))
	case int8:
		code = c.intCode(int64(t))
	case uint8:
		code = c.intCode(int64(t))
	case uint16:
		code = c.intCode(int64(t))
	case uint32:
		code = c.intCode(int64(t))
	case uint64:
		code = c.textCode(strconv.FormatUint(t, 10))
	case *big.Int:
		code = c.textCode(t.String())
	case duckdb.Decimal:
		code = c.textCode(t.String())
	case time.Time:
		code = c.textCode(t.Format(time.DateOnly))
	case float32:
		code = c.floatCode(float64(t))
	case float64:
		code = c.floatCode(t)
	case nil:
		c.nulls++
	default:
		return fmt.Errorf("unexpected %T for a categorical covariate", v)
	}
	c.codes = append(c.codes, code)
	return nil
}

func (c *catCol) textCode(s string) int32 {
	if code, ok := c.text[s]; ok {
		return code
	}
	if c.text == nil {
		c.text = map[string]int32{}
	}
	code := int32(len(c.levels))
	c.text[s] = code
	c.levels = append(c.levels, s)
	return code
}

func (c *catCol) intCode(x int64) int32 {
	if code, ok := c.ints[x]; ok {
		return code
	}
	if c.ints == nil {
		c.ints = map[int64]int32{}
	}
	code := int32(len(c.levels))
	c.ints[x] = code
	c.levels = append(c.levels, strconv.FormatInt(x, 10))
	return code
}

func (c *catCol) floatCode(x float64) int32 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		if c.nonFinite == 0 {
			c.firstBad = len(c.codes)
		}
		c.nonFinite++
		return 0
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

func (c *catCol) finiteCheck(name string) func(func(int) string) error {
	return func(unit func(int) string) error {
		if c.nonFinite > 0 {
			return fmt.Errorf("%w: column %s has %s (for example at unit %s); replace or filter them in cohort.sql",
				warehouse.ErrBadInput, name, warehouse.Plural(c.nonFinite, "NaN or infinite value"), unit(c.firstBad))
		}
		return nil
	}
}

// finish sorts the levels and renumbers the codes so that Levels[0], the
// reference level, is the smallest.
func (c *catCol) finish() ([]string, []int32) {
	levels, remap := warehouse.LevelOrder(c.levels)
	for i, code := range c.codes {
		c.codes[i] = remap[code]
	}
	return levels, c.codes
}

// pow10 holds the exactly representable powers of ten.
var pow10 = [...]float64{1, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10,
	1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22}

// toFloat converts a numeric driver value to float64; ok is false for
// NULL. A DATE becomes days since 1970-01-01.
func toFloat(v any) (f float64, ok bool, err error) {
	switch t := v.(type) {
	case float64:
		return t, true, nil
	case int64:
		return float64(t), true, nil
	case int32:
		return float64(t), true, nil
	case float32:
		return float64(t), true, nil
	case int16:
		return float64(t), true, nil
	case int8:
		return float64(t), true, nil
	case uint8:
		return float64(t), true, nil
	case uint16:
		return float64(t), true, nil
	case uint32:
		return float64(t), true, nil
	case uint64:
		return float64(t), true, nil
	case bool:
		if t {
			return 1, true, nil
		}
		return 0, true, nil
	case *big.Int:
		f, _ := new(big.Float).SetInt(t).Float64()
		return f, true, nil
	case duckdb.Decimal:
		return decimalFloat(t), true, nil
	case time.Time:
		// DuckDB returns a DATE as midnight UTC.
		days := t.Unix() / 86400
		if t.Unix()%86400 < 0 {
			days--
		}
		return float64(days), true, nil
	case nil:
		return 0, false, nil
	}
	return 0, false, fmt.Errorf("unexpected %T for a number", v)
}

// decimalFloat is the double nearest a DECIMAL: when the unscaled value and
// the power of ten are both exact doubles, one IEEE division rounds
// correctly; otherwise the driver's big.Float path.
func decimalFloat(d duckdb.Decimal) float64 {
	if d.Value.IsInt64() && int(d.Scale) < len(pow10) {
		if v := d.Value.Int64(); v > -(1<<53) && v < 1<<53 {
			return float64(v) / pow10[d.Scale]
		}
	}
	return d.Float64()
}
