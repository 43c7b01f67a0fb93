package score

import (
	"reflect"
	"strings"
	"testing"
)

// TestDesign: dummy coding with the first level as reference (common
// practice), numeric covariates as they are, constant categoricals
// refused by name.
func TestDesign(t *testing.T) {
	tests := []struct {
		name    string
		covs    []DesignCovariate
		want    []DesignTerm
		wantErr string
	}{
		{"numeric only", []DesignCovariate{{Name: "age"}, {Name: "bmi"}},
			[]DesignTerm{{"age", 0, -1}, {"bmi", 1, -1}}, ""},
		{"categorical drops the first level", []DesignCovariate{{Name: "age"}, {Name: "region", Categorical: true, Levels: []string{"north", "south", "valley"}}},
			[]DesignTerm{{"age", 0, -1}, {"region=south", 1, 1}, {"region=valley", 1, 2}}, ""},
		{"constant categorical", []DesignCovariate{{Name: "plan", Categorical: true, Levels: []string{"gold"}}},
			nil, `covariate plan is constant in the cohort (every unit is "gold")`},
		{"empty categorical", []DesignCovariate{{Name: "plan", Categorical: true}},
			nil, `every unit is ""`},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := Design(tc.covs)
			if tc.wantErr != "" {
				if err == nil || !strings.Contains(err.Error(), tc.wantErr) {
					t.Fatalf("Design error = %v, want it to contain %q", err, tc.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(got, tc.want) {
				t.Errorf("Design = %v, want %v", got, tc.want)
			}
		})
	}
}
