package assign

import (
	"errors"
	"fmt"
	"math"
	"slices"
)

// ErrSubclass marks a subclass that holds no treated or no control unit,
// so no within-subclass contrast exists; use fewer subclasses.
var ErrSubclass = errors.New("subclass lacks a treatment group")

// DefaultSubclasses is the number of subclasses Subclasses uses for k = 0:
// Cochran (1968, Biometrics 24:295) found that five subclasses on a normal
// covariate remove about 90% of the bias, the figure Rosenbaum & Rubin
// (1984, JASA 79:516) carried over to the propensity score.
const DefaultSubclasses = 5

// Subclasses cuts the eligible units into k subclasses (k = 0 means
// DefaultSubclasses) at the quantiles of ps over all eligible units, treated
// and control pooled (Rosenbaum & Rubin 1984). The breaks are
//
//	q_j = Q(j/k), j = 0..k,
//
// with Q the sample quantile of Hyndman & Fan (1996, Am Stat 50:361)
// definition 7 (R's default): Q(p) = x_(f) + (h - f)(x_(f+1) - x_(f)),
// h = (n-1)p, f = floor(h), on the sorted eligible scores. Subclass j
// (0-based) holds the units with q_j < ps <= q_{j+1}, subclass 0 also
// q_0 — R's cut(ps, breaks, include.lowest = TRUE). With tied scores two
// breaks can coincide; the subclass between them is then empty.
//
// The result has one entry per unit, -1 for ineligible units. Scores of
// ineligible units are never read. A non-empty subclass with no treated or
// no control unit returns the subclasses together with an error wrapping
// ErrSubclass that names it; k < 0 is ErrOption; an eligible NaN or
// infinite ps is ErrScore; length mismatches panic.
func Subclasses(ps []float64, treated []bool, eligible []bool, k int) ([]int32, error) {
	n := len(ps)
	if len(treated) != n || (eligible != nil && len(eligible) != n) {
		panic(fmt.Sprintf("assign.Subclasses: len(ps) = %d, len(treated) = %d, len(eligible) = %d", n, len(treated), len(eligible)))
	}
	if k < 0 {
		return nil, fmt.Errorf("subclassification: k = %d: need k >= 1 (0 = %d): %w", k, DefaultSubclasses, ErrOption)
	}
	if k == 0 {
		k = DefaultSubclasses
	}
	var xs []float64
	for i, p := range ps {
		if eligible != nil && !eligible[i] {
			continue
		}
		if math.IsNaN(p) || math.IsInf(p, 0) {
			return nil, fmt.Errorf("subclassification: unit %d has score %v; exclude it via eligible: %w", i, p, ErrScore)
		}
		xs = append(xs, p)
	}
	sub := make([]int32, n)
	for i := range sub {
		sub[i] = -1
	}
	if len(xs) == 0 {
		return sub, nil
	}
	slices.Sort(xs)
	br := make([]float64, k+1)
	for j := range br {
		h := float64(len(xs)-1) * float64(j) / float64(k)
		f := math.Floor(h)
		lo := xs[int(f)]
		if int(f)+1 < len(xs) {
			br[j] = lo + (h-f)*(xs[int(f)+1]-lo)
		} else {
			br[j] = lo
		}
	}
	br[k] = xs[len(xs)-1] // exact maximum, whatever the rounding
	type count struct{ t, c int }
	counts := make([]count, k)
	for i, p := range ps {
		if eligible != nil && !eligible[i] {
			continue
		}
		j, _ := slices.BinarySearch(br[1:], p) // first j with p <= q_{j+1}
		sub[i] = int32(j)
		if treated[i] {
			counts[j].t++
		} else {
			counts[j].c++
		}
	}
	for j, c := range counts {
		if (c.t == 0) != (c.c == 0) {
			side := "control"
			if c.t == 0 {
				side = "treated"
			}
			return sub, fmt.Errorf("subclassification: subclass %d of %d has %d units but no %s unit: use fewer subclasses: %w", j, k, c.t+c.c, side, ErrSubclass)
		}
	}
	return sub, nil
}

// Estimand selects the population SubclassWeights targets.
type Estimand int

const (
	// ATE weights to the pooled eligible sample.
	ATE Estimand = iota
	// ATT weights to the treated units.
	ATT
)

// SubclassWeights turns subclasses into unit weights whose weighted
// difference in group means equals the subclassification estimator
// (Cochran 1968; Rosenbaum & Rubin 1984):
//
//	ATE: sum_s (n_s / N)    (ybar_s1 - ybar_s0)   w_i = n_s / n_{s,g(i)}
//	ATT: sum_s (n_s1 / N_1) (ybar_s1 - ybar_s0)   w_i = 1 if treated, n_s1 / n_s0 if control
//
// with n_s the units of subclass s, n_s1 and n_s0 its treated and
// controls, g(i) unit i's group, N and N_1 the totals over subclasses that
// hold both groups. Units with sub = -1, and units of a subclass lacking
// either group, get weight 0. Length mismatch panics; an unknown estimand
// is ErrOption.
func SubclassWeights(sub []int32, treated []bool, estimand Estimand) ([]float64, error) {
	if len(sub) != len(treated) {
		panic(fmt.Sprintf("assign.SubclassWeights: len(sub) = %d, len(treated) = %d", len(sub), len(treated)))
	}
	if estimand != ATE && estimand != ATT {
		return nil, fmt.Errorf("subclass weights: estimand %d: use ATE or ATT: %w", int(estimand), ErrOption)
	}
	n1 := map[int32]float64{}
	n0 := map[int32]float64{}
	for i, s := range sub {
		if s < 0 {
			continue
		}
		if treated[i] {
			n1[s]++
		} else {
			n0[s]++
		}
	}
	w := make([]float64, len(sub))
	for i, s := range sub {
		if s < 0 || n1[s] == 0 || n0[s] == 0 {
			continue
		}
		switch {
		case estimand == ATT && treated[i]:
			w[i] = 1
		case estimand == ATT:
			w[i] = n1[s] / n0[s]
		case treated[i]:
			w[i] = (n1[s] + n0[s]) / n1[s]
		default:
			w[i] = (n1[s] + n0[s]) / n0[s]
		}
	}
	return w, nil
}
