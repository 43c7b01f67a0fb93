package weights

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"testing"
)

// Agreement with numpy.percentile (linear, Hyndman & Fan type 7) and
// numpy.clip applied within each arm over the positive weights, numpy 1.24
// from Debian, on ATE weights of statsmodels' bundled spector data with
// five units restricted to 0: testdata/weights/make_truncate.py. Tolerance
// 1e-13 relative.
func TestTruncateNumpy(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "testdata", "weights", "truncate_reference.json"))
	if err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Weights []float64
		Z       []int
		Cases   []struct {
			Low, High float64
			Truncated []float64
		}
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	z := make([]bool, len(ref.Z))
	for i, v := range ref.Z {
		z[i] = v == 1
	}
	for _, c := range ref.Cases {
		got, err := Truncate(ref.Weights, z, c.Low, c.High)
		if err != nil {
			t.Fatal(err)
		}
		changed := 0
		for i := range got {
			if math.Abs(got[i]-c.Truncated[i]) > 1e-13*math.Abs(c.Truncated[i]) {
				t.Errorf("[%v, %v] unit %d: %v, numpy %v", c.Low, c.High, i, got[i], c.Truncated[i])
			}
			if ref.Weights[i] == 0 && got[i] != 0 {
				t.Errorf("[%v, %v] unit %d: restricted unit got weight %v", c.Low, c.High, i, got[i])
			}
			if got[i] != ref.Weights[i] {
				changed++
			}
		}
		// Only the no-op case leaves every weight alone.
		if (c.Low == 0 && c.High == 100) != (changed == 0) {
			t.Errorf("[%v, %v]: %d weights changed", c.Low, c.High, changed)
		}
	}
}

// Hand-worked type-7 percentiles (Hyndman & Fan 1996): of 1..5, the 25th
// is at h = 1 → 2; the 10th at h = 0.4 → 1.4; of {1, 10}, the 50th is 5.5.
func TestPercentileHandWorked(t *testing.T) {
	tests := []struct {
		xs   []float64
		p    float64
		want float64
	}{
		{[]float64{1, 2, 3, 4, 5}, 25, 2},
		{[]float64{1, 2, 3, 4, 5}, 10, 1.4},
		{[]float64{1, 2, 3, 4, 5}, 100, 5},
		{[]float64{1, 2, 3, 4, 5}, 0, 1},
		{[]float64{1, 10}, 50, 5.5},
		{[]float64{7}, 99, 7},
	}
	for _, tc := range tests {
		if got := Percentile(tc.xs, tc.p); math.Abs(got-tc.want) > 1e-15 {
			t.Errorf("Percentile(%v, %v) = %v, want %v", tc.xs, tc.p, got, tc.want)
		}
	}
}

func TestTruncateArmsSeparately(t *testing.T) {
	// Treated weights all 1 (ATT): truncation must not touch them even
	// when the controls' weights are far larger.
	w := []float64{1, 1, 1, 0.5, 2, 100, 0}
	z := []bool{true, true, true, false, false, false, false}
	got, err := Truncate(w, z, 0, 50)
	if err != nil {
		t.Fatal(err)
	}
	want := []float64{1, 1, 1, 0.5, 2, 2, 0}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("got %v, want %v", got, want)
		}
	}
	if _, err := Truncate([]float64{1, math.NaN()}, []bool{true, false}, 1, 99); err == nil {
		t.Error("NaN weight: no error")
	}
}

func TestClip(t *testing.T) {
	got := Clip([]float64{0, 0.05, 0.5, 20, math.NaN()}, 0.1, 10)
	want := []float64{0, 0.1, 0.5, 10}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("unit %d: %v, want %v", i, got[i], want[i])
		}
	}
	if !math.IsNaN(got[4]) {
		t.Errorf("NaN became %v", got[4])
	}
	for name, f := range map[string]func(){
		"lo > hi":      func() { Clip(nil, 2, 1) },
		"negative lo":  func() { Clip(nil, -1, 1) },
		"bad pct":      func() { Truncate(nil, nil, 60, 40) },
		"len mismatch": func() { Truncate([]float64{1}, nil, 0, 100) },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic", name)
				}
			}()
			f()
		}()
	}
}
