package assign

import "sort"

// Matched is one matched set in the form every algorithm's result takes,
// so the stages after matching (matches rows, weights, effects) handle
// every algorithm alike: one
// treated unit with its controls, one control with several treated units
// (full matching), or a subclass. Weights follow the ATT convention within
// the set: each treated unit 1, the controls sharing the treated count.
type Matched struct {
	ID       int
	Treated  []int
	Controls []int
	// Distances holds each row's distance to its set's single unit (0 for that
	// unit), in the order treated then controls; nil for subclasses.
	Distances []float64
	// TreatedWeight and ControlWeight are the set weights of a treated and
	// a control row; Weights, when set, gives each row's own weight instead (subclasses).
	TreatedWeight, ControlWeight float64
	Weights                      []float64
}

// FromSubclasses turns subclasses (as Subclasses numbers them, with the
// weights of SubclassWeights) into matched sets whose rows carry the
// subclassification weights; a subclass lacking either arm is left out
// (its units have weight 0).
func FromSubclasses(sub []int32, z []bool, w []float64) []Matched {
	byID := map[int32]*Matched{}
	var ids []int32
	for i, k := range sub {
		if k < 0 || w[i] == 0 {
			continue
		}
		g, ok := byID[k]
		if !ok {
			g = &Matched{ID: int(k) + 1}
			byID[k] = g
			ids = append(ids, k)
		}
		if z[i] {
			g.Treated = append(g.Treated, i)
		} else {
			g.Controls = append(g.Controls, i)
		}
	}
	sort.Slice(ids, func(a, b int) bool { return ids[a] < ids[b] })
	out := make([]Matched, 0, len(ids))
	for _, k := range ids {
		g := byID[k]
		for _, u := range g.Treated {
			g.Weights = append(g.Weights, w[u])
		}
		for _, u := range g.Controls {
			g.Weights = append(g.Weights, w[u])
		}
		out = append(out, *g)
	}
	return out
}

// FromSets turns one-treated sets (Greedy, Optimal) into matched sets:
// treated weight 1, each control 1/k of its set (as weights.FromSets).
func FromSets(sets []Set) []Matched {
	out := make([]Matched, len(sets))
	for k, set := range sets {
		d := append([]float64{0}, set.Distances...)
		out[k] = Matched{ID: set.ID, Treated: []int{set.Treated}, Controls: set.Controls, Distances: d, TreatedWeight: 1, ControlWeight: 1 / float64(len(set.Controls))}
	}
	return out
}

// FromGroups turns full-matching groups into matched sets: treated
// weight 1, each control the group's treated count over its control count.
func FromGroups(gs []Group) []Matched {
	out := make([]Matched, len(gs))
	for k, g := range gs {
		d := make([]float64, 0, len(g.Treated)+len(g.Controls))
		if len(g.Treated) == 1 {
			d = append(d, 0)
			d = append(d, g.Distances...)
		} else {
			d = append(d, g.Distances...)
			d = append(d, 0)
		}
		out[k] = Matched{ID: g.ID, Treated: g.Treated, Controls: g.Controls, Distances: d, TreatedWeight: 1, ControlWeight: float64(len(g.Treated)) / float64(len(g.Controls))}
	}
	return out
}
