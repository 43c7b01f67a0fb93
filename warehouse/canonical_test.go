package warehouse

import (
	"errors"
	"slices"
	"testing"
)

// TestCanonicalOrder: whatever order the rows arrive in, the cohort
// leaves CanonicalOrder sorted by unit id with every column carried
// along, so the same data always gives the same slices; a duplicate id is
// refused. Common practice: a canonical sort before any order-dependent
// step.
func TestCanonicalOrder(t *testing.T) {
	cases := []struct {
		name    string
		c       *Cohort
		wantIDs []int64
		wantTxt []string
		dup     bool
	}{
		{
			name: "integer ids shuffled",
			c: &Cohort{IDKind: IDInt, IntIDs: []int64{30, -2, 7}, Treated: []bool{true, false, true},
				Covariates: []Covariate{{Name: "x", Values: []float64{3, -0.2, 0.7}}, {Name: "g", Kind: Categorical, Levels: []string{"a", "b"}, Codes: []int32{1, 0, 1}}},
				Outcomes:   []Outcome{{Name: "y", Values: []float64{300, -20, 70}}}},
			wantIDs: []int64{-2, 7, 30},
		},
		{
			name: "text ids bytewise",
			c: &Cohort{IDKind: IDText, TextIDs: []string{"b", "B", "a"}, Treated: []bool{true, false, false},
				Covariates: []Covariate{{Name: "x", Values: []float64{2, 1, 0}}}},
			wantTxt: []string{"B", "a", "b"},
		},
		{
			name:    "already sorted",
			c:       &Cohort{IDKind: IDInt, IntIDs: []int64{1, 2}, Treated: []bool{true, false}},
			wantIDs: []int64{1, 2},
		},
		{
			name: "duplicate",
			c:    &Cohort{Unit: "u", IDKind: IDInt, IntIDs: []int64{5, 1, 5}, Treated: []bool{true, false, true}},
			dup:  true,
		},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			// Row identity before sorting: id -> (treated, x, code, y).
			type row struct {
				treated bool
				x, y    float64
				code    int32
			}
			before := map[string]row{}
			key := func(i int) string {
				if tc.c.IDKind == IDInt {
					return string(rune(tc.c.IntIDs[i] + 1000))
				}
				return tc.c.TextIDs[i]
			}
			get := func(i int) row {
				r := row{treated: tc.c.Treated[i]}
				if len(tc.c.Covariates) > 0 {
					r.x = tc.c.Covariates[0].Values[i]
				}
				if len(tc.c.Covariates) > 1 {
					r.code = tc.c.Covariates[1].Codes[i]
				}
				if len(tc.c.Outcomes) > 0 {
					r.y = tc.c.Outcomes[0].Values[i]
				}
				return r
			}
			for i := range tc.c.N() {
				before[key(i)] = get(i)
			}
			err := CanonicalOrder(tc.c)
			if tc.dup {
				if !errors.Is(err, ErrBadInput) {
					t.Fatalf("duplicate ids: got %v, want bad input", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if tc.wantIDs != nil && !slices.Equal(tc.c.IntIDs, tc.wantIDs) {
				t.Fatalf("ids %v, want %v", tc.c.IntIDs, tc.wantIDs)
			}
			if tc.wantTxt != nil && !slices.Equal(tc.c.TextIDs, tc.wantTxt) {
				t.Fatalf("ids %q, want %q", tc.c.TextIDs, tc.wantTxt)
			}
			for i := range tc.c.N() {
				if got, want := get(i), before[key(i)]; got != want {
					t.Fatalf("row %d (%s) carries %+v, want %+v", i, key(i), got, want)
				}
			}
		})
	}
}
