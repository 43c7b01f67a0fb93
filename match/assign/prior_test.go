package assign

import (
	"reflect"
	"testing"
)

// TestKeepPrior: each rule that breaks a prior set releases it and only
// it (the stable-rematching rules of KeepPrior's doc; common practice for
// incremental matching, no outside reference).
func TestKeepPrior(t *testing.T) {
	// Units: 0,1 treated; 2,3,4 controls. Scores spaced 0.1 apart.
	score := []float64{0.0, 1.0, 0.05, 1.05, 0.5}
	treated := []bool{true, true, false, false, false}
	all := []bool{true, true, true, true, true}
	pair := func(id int64, t, c int) PriorSet {
		return PriorSet{ID: id, Members: []PriorMember{{t, true, true}, {c, false, true}}}
	}
	tests := []struct {
		name     string
		sets     []PriorSet
		eligible []bool
		strata   []int32
		opt      Options
		wantIDs  []int
		released int
	}{
		{"both hold", []PriorSet{pair(7, 1, 3), pair(3, 0, 2)}, all, nil, Options{Controls: 1, Caliper: 0.2}, []int{3, 7}, 0},
		{"caliper", []PriorSet{pair(1, 0, 4)}, all, nil, Options{Controls: 1, Caliper: 0.2}, nil, 1},
		{"no caliper keeps far pairs", []PriorSet{pair(1, 0, 4)}, all, nil, Options{Controls: 1}, []int{1}, 0},
		{"left support", []PriorSet{pair(1, 0, 2)}, []bool{true, true, false, true, true}, nil, Options{Controls: 1}, nil, 1},
		{"left the cohort", []PriorSet{{ID: 1, Members: []PriorMember{{0, true, true}, {0, false, false}}}}, all, nil, Options{Controls: 1}, nil, 1},
		{"changed arm", []PriorSet{{ID: 1, Members: []PriorMember{{0, true, true}, {1, false, true}}}}, all, nil, Options{Controls: 1}, nil, 1},
		{"other stratum", []PriorSet{pair(1, 0, 2)}, all, []int32{0, 0, 1, 0, 0}, Options{Controls: 1}, nil, 1},
		{"too many controls", []PriorSet{{ID: 1, Members: []PriorMember{{0, true, true}, {2, false, true}, {4, false, true}}}}, all, nil, Options{Controls: 1}, nil, 1},
		{"control in two sets without reuse", []PriorSet{pair(1, 0, 2), pair(2, 1, 2)}, all, nil, Options{Controls: 1}, []int{1}, 1},
		{"control in two sets with reuse", []PriorSet{pair(1, 0, 2), pair(2, 1, 2)}, all, nil, Options{Controls: 1, Reuse: true}, []int{1, 2}, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			kept, released, _ := KeepPrior(tc.sets, score, treated, tc.eligible, tc.strata, tc.opt)
			var ids []int
			for _, s := range kept {
				ids = append(ids, s.ID)
			}
			if !reflect.DeepEqual(ids, tc.wantIDs) || released != tc.released {
				t.Errorf("kept %v released %d, want %v and %d", ids, released, tc.wantIDs, tc.released)
			}
		})
	}
	kept, _, maxID := KeepPrior([]PriorSet{pair(9, 0, 2)}, score, treated, all, nil, Options{Controls: 1})
	if maxID != 9 || len(kept) != 1 || kept[0].Distances[0] != 0.05 {
		t.Errorf("maxID %d, kept %+v; want 9 and distance 0.05", maxID, kept)
	}
}
