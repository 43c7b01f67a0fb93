package score

import (
	"math"
	"runtime"
	"sync"
)

// collinearTol is the largest 1 − R² at which a column counts as a linear
// combination of the earlier columns and the intercept (R² of the
// regression of the column on them). Exact collinearity leaves about 1e-15
// after rounding; 1e-9 (a variance inflation factor of 1e9) keeps a wide
// margin and still flags only designs whose coefficients could not be
// estimated to any useful precision.
const collinearTol = 1e-9

// columnStats returns each column's mean and the reciprocal of its
// population standard deviation, √(Σ(x − x̄)²/n), checking on the way
// that every value is finite and that the column is not constant. The mean
// uses the corrected two-pass algorithm (Chan, Golub & LeVeque 1983, Am.
// Stat. 37:242). The first error in column order is returned.
func columnStats(x [][]float64, names []string) (center, invScale []float64, err error) {
	p := len(x)
	center = make([]float64, p)
	invScale = make([]float64, p)
	errs := make([]error, p)
	var next int
	var mu sync.Mutex
	var wg sync.WaitGroup
	for range min(runtime.GOMAXPROCS(0), p) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				mu.Lock()
				j := next
				next++
				mu.Unlock()
				if j >= p {
					return
				}
				center[j], invScale[j], errs[j] = oneColumn(x[j], names[j])
			}
		}()
	}
	wg.Wait()
	for _, e := range errs {
		if e != nil {
			return nil, nil, e
		}
	}
	return center, invScale, nil
}

func oneColumn(col []float64, name string) (center, invScale float64, err error) {
	var sum float64
	bad := 0
	first := -1
	constant := true
	for i, v := range col {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			if bad == 0 {
				first = i
			}
			bad++
			continue
		}
		sum += v
		if v != col[0] {
			constant = false
		}
	}
	if bad > 0 {
		return 0, 0, &NonFiniteError{Column: name, Unit: first, Value: col[first], Count: bad}
	}
	if constant {
		return 0, 0, &ConstantError{Column: name, Value: col[0]}
	}
	n := float64(len(col))
	mean := sum / n
	var ss, corr float64
	for _, v := range col {
		d := v - mean
		ss += d * d
		corr += d
	}
	mean += corr / n
	ss -= corr * corr / n
	sd := math.Sqrt(ss / n)
	if !(sd > 0) || math.IsInf(1/sd, 0) {
		return 0, 0, &ConstantError{Column: name, Value: col[0]}
	}
	return mean, 1 / sd, nil
}

// checkCollinear looks for design columns that are linear combinations of
// earlier ones, given the Gram matrix G = X̃'X̃ of the standardised design
// with the intercept first (upper triangle, k×k row-major; any positive
// multiple of it will do). It runs a Cholesky factorisation column by
// column, skipping a column whose squared residual on the kept columns,
// r_j = G_jj − G_jK G_KK⁻¹ G_Kj, is below collinearTol·G_jj; for the first
// such column the combination c = G_KK⁻¹ G_Kj names the columns it is made
// of. names excludes the intercept.
func checkCollinear(g []float64, k int, names []string) error {
	l := make([]float64, k*k) // lower-triangular factor, rows of kept columns
	var kept []int
	var cerr *CollinearError
	y := make([]float64, 0, k)
	for j := range k {
		y = y[:len(kept)]
		for a, ia := range kept {
			s := g[ia*k+j]
			for b := range a {
				s -= l[ia*k+kept[b]] * y[b]
			}
			y[a] = s / l[ia*k+ia]
		}
		r := g[j*k+j]
		for _, v := range y {
			r -= v * v
		}
		if r > collinearTol*g[j*k+j] {
			for a, ia := range kept {
				l[j*k+ia] = y[a]
			}
			l[j*k+j] = math.Sqrt(r)
			kept = append(kept, j)
			continue
		}
		if j == 0 {
			// Only a design with no rows has a degenerate intercept, and
			// that is caught before.
			panic("score: degenerate intercept column")
		}
		if cerr != nil {
			cerr.Others = append(cerr.Others, names[j-1])
			continue
		}
		// Back-substitution L_KK' c = y.
		c := make([]float64, len(kept))
		for a := len(kept) - 1; a >= 0; a-- {
			s := y[a]
			for b := a + 1; b < len(kept); b++ {
				s -= l[kept[b]*k+kept[a]] * c[b]
			}
			c[a] = s / l[kept[a]*k+kept[a]]
		}
		// Every standardised column has the same norm, so the
		// coefficients are comparable.
		var big float64
		for _, v := range c {
			big = max(big, math.Abs(v))
		}
		cerr = &CollinearError{Column: names[j-1]}
		for a, ia := range kept {
			if ia > 0 && math.Abs(c[a]) > 1e-6*big {
				cerr.Of = append(cerr.Of, names[ia-1])
			}
		}
	}
	if cerr != nil {
		return cerr
	}
	return nil
}
