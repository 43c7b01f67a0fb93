package sqlcore

import "math"

// Batch is implemented by the collector's sinks for engines that read a
// result a column block at a time. Each method takes a run of non-NULL
// values and is equivalent to calling the Sink method of the same type on
// each value in order: the same slices, counts and first bad row. The
// per-value path formats every number as text in case a message needs
// it; a numeric covariate or outcome never does, and on a million-row
// cohort that formatting costs more than the read itself.
type Batch interface {
	// Floats is Float on each of v.
	Floats(v []float64)
	// Ints is Int on each of v.
	Ints(v []int64)
	// Exacts is Exact(f[i], text(i), false) on each of f (a DECIMAL run);
	// text is called only where the column keeps or shows it (treatment,
	// categorical), so a numeric column costs no formatting.
	Exacts(f []float64, text func(i int) string)
}

var _ Batch = (*col)(nil)

func (c *col) Floats(v []float64) {
	if c.role != roleNum {
		for _, f := range v {
			c.Float(f)
		}
		return
	}
	base := len(c.vals)
	c.vals = append(c.vals, v...)
	for i, f := range v {
		if math.IsNaN(f) || math.IsInf(f, 0) {
			if c.nonFinite == 0 {
				c.firstBad = base + i
			}
			c.nonFinite++
		}
	}
}

func (c *col) Exacts(f []float64, text func(i int) string) {
	if c.role != roleNum {
		for i, x := range f {
			c.Exact(x, text(i), false)
		}
		return
	}
	c.Floats(f) // Exact of a numeric column is number, as Float's is
}

func (c *col) Ints(v []int64) {
	switch c.role {
	case roleIntID:
		c.ids = append(c.ids, v...)
	case roleNum:
		for _, x := range v {
			c.vals = append(c.vals, float64(x))
		}
	default:
		for _, x := range v {
			c.Int(x)
		}
	}
}
