package warehouse

import (
	"fmt"
	"math"
	"math/big"
	"strconv"
	"strings"
)

// Exact sums in the engine.
//
// A floating-point SUM depends on the order its rows are added in, and a
// parallel scan, a distributed engine or a reshuffled table adds them in a
// different order every time: the last bits of every sum change, then
// the coefficients, the scores, the weights, and, through ties, the
// matches. Integer sums do not depend on order. So every sum a
// warehouse-scale pass makes is of integers: each row's value x is
// scaled by a power of two and split into two or three 64-bit integer
// parts,
//
//	s = x / 2^e0,  p1 = round(s),  p2 = round((s − p1)·2^q),  p3 = …
//
// which the engine sums in its own exact integers (Postgres: sum(bigint)
// accumulates in 128 bits and returns numeric; DuckDB: sum(BIGINT) returns
// HUGEINT). The parts come back as decimal text and are combined here in
// big.Float, exactly, then rounded once to float64. The split itself is a
// fixed computation on one row, the same on every node; so the result is
// the same whatever order, or on whichever node, each row was added —
// and it is the correctly rounded sum of the rounded parts, more accurate
// than a float sum.
//
// Range and resolution: with two parts (q = 62) a value must satisfy
// |x| < 2^(e0+62) and bits below 2^(e0−63) are dropped; with three parts
// (q = 50 twice) |x| < 2^(e0+62) and the resolution is 2^(e0−101). A
// value out of range makes the engine raise an out-of-range error on the
// cast, never a wrong sum.

// exactKind says how many integer parts a summed value is split into.
type exactKind struct {
	e0    int   // scale: the first part counts units of 2^e0
	steps []int // each further part refines the previous residual by 2^step
}

var (
	// designScale is for per-row values on the standardised design's
	// scale (|x̃| of a few units; products of two): |x| < 2^62, resolution
	// 2^-63.
	designScale = exactKind{e0: 0, steps: []int{62}}
	// rawScale is for values on the data's own scale (covariates,
	// outcomes, weights and their products): |x| < 2^102 ≈ 5e30,
	// resolution 2^-61 · 2^-50 = 2^-111 ≈ 4e-34.
	rawScale = exactKind{e0: 40, steps: []int{50, 50}}
	// designScaleOne is designScale in one part, for Postgres, whose
	// result rows hold at most 1,664 columns (about 57 design columns
	// at one aggregate per sum, 40 at two): |x| < 2^32, resolution 2^-31.
	// A sum's rounding error is then about √n·2^-31 — at a million rows
	// 5e-7 absolute on sums of order 10^5, far inside the fit's
	// tolerance, and still exact, hence order-free.
	designScaleOne = exactKind{e0: -30}
)

// MaxAggregates is how many aggregates a pass may hold on Postgres
// before its sums switch to one NUMERIC each (sumSet.decimal): its
// limit of 1,664 result columns, less room for the others.
const MaxAggregates = 1600

// sumPart is one integer aggregate of a sumSet and the power of two its
// units are worth.
type sumPart struct {
	agg string
	exp int
}

// sumSet builds the integer aggregates of one pass and decodes their
// result. Value i is Σ_j parts[i][j].agg · 2^parts[i][j].exp.
type sumSet struct {
	parts [][]sumPart
	// decimal sums each double as one NUMERIC instead of integer parts
	// (Postgres only). A partitioned pass is flattened onto the table
	// for a node to run, so every reference to a per-row value repeats
	// its whole defining expression; the integer split refers to its
	// value up to seven times, which made a pass over the weights many
	// times slower. CAST(x AS NUMERIC) refers to it once, is a fixed
	// function of the row (Postgres converts a double to 15 significant
	// digits), and sum(numeric) is exact: still independent of order
	// and node, with each row's value rounded to 15 digits.
	decimal bool
}

// count adds the number of rows where cond holds (cond "" counts all
// rows).
func (s *sumSet) count(cond string) int {
	agg := "count(*)"
	if cond != "" {
		agg = "sum(CASE WHEN " + cond + " THEN 1 ELSE 0 END)"
	}
	s.parts = append(s.parts, []sumPart{{agg, 0}})
	return len(s.parts) - 1
}

// integer adds the sum of an integer-valued expression.
func (s *sumSet) integer(expr string) int {
	s.parts = append(s.parts, []sumPart{{"sum(" + expr + ")", 0}})
	return len(s.parts) - 1
}

// sum adds the exact sum of the DOUBLE PRECISION expression x (NULL rows
// add nothing), split as k says.
func (s *sumSet) sum(x string, k exactKind) int {
	if s.decimal {
		s.parts = append(s.parts, []sumPart{{"sum(CAST(" + x + " AS NUMERIC))", 0}})
		return len(s.parts) - 1
	}
	scaled := "(" + x + ")"
	switch {
	case k.e0 > 0:
		scaled = "(" + x + ") / " + pow2(k.e0)
	case k.e0 < 0:
		scaled = "(" + x + ") * " + pow2(-k.e0)
	}
	var ps []sumPart
	cur, exp := scaled, k.e0
	for i := 0; ; i++ {
		ps = append(ps, sumPart{"sum(CAST(round(" + cur + ") AS BIGINT))", exp})
		if i == len(k.steps) {
			break
		}
		cur = "((" + cur + " - round(" + cur + ")) * " + pow2(k.steps[i]) + ")"
		exp -= k.steps[i]
	}
	s.parts = append(s.parts, ps)
	return len(s.parts) - 1
}

// pow2 is 2^e (0 ≤ e ≤ 62) as an integer literal: exact, and of an
// integer type that both engines promote to DOUBLE PRECISION against a
// double.
func pow2(e int) string {
	if e < 0 || e > 62 {
		panic(fmt.Sprintf("warehouse: 2^%d is not a bigint literal", e))
	}
	return strconv.FormatUint(1<<uint(e), 10)
}

// aggs lists the integer aggregates in order.
func (s *sumSet) aggs() []string {
	var out []string
	for _, ps := range s.parts {
		for _, p := range ps {
			out = append(out, p.agg)
		}
	}
	return out
}

// arraySQL renders the aggregates as one VARCHAR column: the text of an
// array of the integer sums (NULL, from no rows, as 0). With partition
// set (a column of the FROM clause's rows), the aggregates are computed
// per partition value in a derived table, and the outer query adds the
// per-partition sums: a distributed engine whose table is partitioned on
// that column computes each partition's aggregates on its own node.
// groupBy (may be empty) is an extra grouping column kept in both
// levels and returned first.
func (s *sumSet) arraySQL(from, partition, groupBy string) string {
	aggs := s.aggs()
	if partition == "" {
		sel := s.arrayExpr()
		if groupBy != "" {
			return "SELECT " + groupBy + ", " + sel + "\nFROM " + from + "\nGROUP BY " + groupBy
		}
		return "SELECT " + sel + "\nFROM " + from
	}
	inner := make([]string, len(aggs))
	outer := make([]string, len(aggs))
	for i, a := range aggs {
		inner[i] = fmt.Sprintf("%s AS a%d", a, i+1)
		outer[i] = fmt.Sprintf("coalesce(sum(a%d), 0)", i+1)
	}
	keys := partition + " AS part"
	group := "part"
	if groupBy != "" {
		keys = groupBy + ", " + keys
		group = groupBy + ", part"
	}
	per := "SELECT " + keys + ",\n  " + strings.Join(inner, ",\n  ") + "\nFROM " + from + "\nGROUP BY " + group
	sel := "CAST(ARRAY[" + strings.Join(outer, ", ") + "] AS VARCHAR)"
	if groupBy != "" {
		return "SELECT " + groupBy + ", " + sel + "\nFROM (" + per + ") AS per\nGROUP BY " + groupBy
	}
	return "SELECT " + sel + "\nFROM (" + per + ") AS per"
}

// arrayExpr is the one-level select item of arraySQL, for a caller that
// puts it beside aggregates of its own over the same rows.
func (s *sumSet) arrayExpr() string {
	aggs := s.aggs()
	items := make([]string, len(aggs))
	for i, a := range aggs {
		items[i] = "coalesce(" + a + ", 0)"
	}
	return "CAST(ARRAY[" + strings.Join(items, ", ") + "] AS VARCHAR)"
}

// doubleExpr renders value i as a DOUBLE PRECISION expression of its
// integer aggregates: each part converted and scaled by its power of two,
// added in a fixed order. It is not the correctly rounded sum that
// decode gives, but it is a fixed function of exact integers, so it too
// does not depend on the order of the rows; for a GROUP BY whose groups
// feed an outer aggregate.
func (s *sumSet) doubleExpr(i int) string {
	var terms []string
	for _, p := range s.parts[i] {
		t := "CAST(coalesce(" + p.agg + ", 0) AS DOUBLE PRECISION)"
		switch {
		case p.exp > 0:
			t += " * " + pow2(p.exp)
		case p.exp < 0:
			t += " / " + pow2(-p.exp)
		}
		terms = append(terms, t)
	}
	return "(" + strings.Join(terms, " + ") + ")"
}

// decode turns arraySQL's text into the values, each the exact sum of
// its parts rounded once to float64.
func (s *sumSet) decode(text string) ([]float64, error) {
	exact, err := s.decodeExact(text)
	if err != nil {
		return nil, err
	}
	out := make([]float64, len(exact))
	for i, v := range exact {
		x, _ := v.Float64()
		if math.IsInf(x, 0) {
			return nil, fmt.Errorf("exact sums: value %d overflows a double", i)
		}
		out[i] = x
	}
	return out, nil
}

// decodeExact turns arraySQL's text into the exact values. Postgres
// prints an array as {1,2,3}, DuckDB as [1, 2, 3].
func (s *sumSet) decodeExact(text string) ([]*big.Float, error) {
	t := strings.TrimSpace(text)
	if len(t) < 2 || !(t[0] == '{' && t[len(t)-1] == '}' || t[0] == '[' && t[len(t)-1] == ']') {
		return nil, fmt.Errorf("exact sums: not an array: %.40q", text)
	}
	t = t[1 : len(t)-1]
	var fields []string
	if strings.TrimSpace(t) != "" {
		fields = strings.Split(t, ",")
	}
	if want := len(s.aggs()); len(fields) != want {
		return nil, fmt.Errorf("exact sums: %d returned, want %d", len(fields), want)
	}
	out := make([]*big.Float, len(s.parts))
	f := 0
	for i, ps := range s.parts {
		acc := exactFloat()
		for _, p := range ps {
			field := strings.TrimSpace(fields[f])
			f++
			v := exactFloat()
			if n, ok := new(big.Int).SetString(field, 10); ok {
				v.SetInt(n)
			} else if _, ok := v.SetString(field); !ok || !s.decimal {
				return nil, fmt.Errorf("exact sums: %q is not an integer", field)
			}
			v.SetMantExp(v, p.exp)
			acc.Add(acc, v)
		}
		out[i] = acc
	}
	return out, nil
}

// exactFloat is a big.Float wide enough that sums of 128-bit integers at
// any of our scales add without rounding.
func exactFloat() *big.Float {
	return new(big.Float).SetPrec(1024).SetMode(big.ToNearestEven)
}

// partitionKey is the name level 0 of a pass gives the partition column.
const partitionKey = "part_key"

// partitionRef is the partition column as the outer levels of a pass
// see it ("" when the cohort is not partitioned).
func partitionRef(partition string) string {
	if partition == "" {
		return ""
	}
	return partitionKey
}
