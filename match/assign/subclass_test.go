package assign

import (
	"encoding/csv"
	"errors"
	"math"
	"os"
	"strconv"
	"testing"
)

func readCSV(t *testing.T, path string) [][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	return rows[1:]
}

func TestSubclassesAgainstR(t *testing.T) {
	// Source: R base quantile(type = 7) and cut(include.lowest = TRUE), and
	// the stratified estimators of Cochran (1968) / Rosenbaum & Rubin (1984)
	// computed in R by testdata/assign/make_subclass.R.
	rows := readCSV(t, "../../testdata/assign/subclass.csv")
	n := len(rows)
	ps, y := make([]float64, n), make([]float64, n)
	treated, eligible := make([]bool, n), make([]bool, n)
	want := make([]int32, n)
	for i, r := range rows {
		ps[i], _ = strconv.ParseFloat(r[0], 64)
		treated[i], eligible[i] = r[1] == "1", r[2] == "1"
		y[i], _ = strconv.ParseFloat(r[3], 64)
		s, _ := strconv.Atoi(r[4])
		want[i] = int32(s)
		if !eligible[i] {
			ps[i] = math.NaN() // never read
		}
	}
	sub, err := Subclasses(ps, treated, eligible, 0)
	if err != nil {
		t.Fatal(err)
	}
	for i := range sub {
		if sub[i] != want[i] {
			t.Fatalf("unit %d (ps %v): subclass %d, R %d", i, ps[i], sub[i], want[i])
		}
	}
	effects := map[string]float64{}
	for _, r := range readCSV(t, "../../testdata/assign/subclass_effects.csv") {
		effects[r[0]], _ = strconv.ParseFloat(r[1], 64)
	}
	for _, tc := range []struct {
		name string
		e    Estimand
	}{{"ATE", ATE}, {"ATT", ATT}} {
		w, err := SubclassWeights(sub, treated, tc.e)
		if err != nil {
			t.Fatal(err)
		}
		var s1, w1, s0, w0 float64
		for i := range w {
			if treated[i] {
				s1, w1 = s1+w[i]*y[i], w1+w[i]
			} else {
				s0, w0 = s0+w[i]*y[i], w0+w[i]
			}
		}
		if got := s1/w1 - s0/w0; math.Abs(got-effects[tc.name]) > 1e-9 {
			t.Errorf("%s: weighted difference %v, R stratified estimate %v", tc.name, got, effects[tc.name])
		}
	}
}

func TestSubclassesErrors(t *testing.T) {
	tests := []struct {
		name    string
		ps      []float64
		treated []bool
		k       int
		want    error
	}{
		{"negative k", []float64{0.1, 0.2}, []bool{true, false}, -1, ErrOption},
		{"NaN", []float64{math.NaN(), 0.2}, []bool{true, false}, 1, ErrScore},
		// Two subclasses: {0.1, 0.2} all control, {0.8, 0.9} all treated.
		{"no treated in a subclass", []float64{0.1, 0.2, 0.8, 0.9}, []bool{false, false, true, true}, 2, ErrSubclass},
		{"fine", []float64{0.1, 0.2, 0.8, 0.9}, []bool{true, false, true, false}, 2, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := Subclasses(tc.ps, tc.treated, nil, tc.k); !errors.Is(err, tc.want) {
				t.Errorf("err = %v, want %v", err, tc.want)
			}
		})
	}
}
