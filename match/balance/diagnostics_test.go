package balance

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"slices"
	"strconv"
	"testing"

	"counterpart/match/num"
)

// diagRef is what testdata/report/diagnostics_ref.py wrote (numpy 1.24 and
// scipy 1.10 from Debian; the script names the function behind each value).
type diagRef struct {
	Scores    map[string]struct{ Treated, Control []float64 }
	Distances map[string]map[string]struct{ Max, Mean float64 }
	KSScipy   map[string]float64 `json:"ks_scipy"`
	Grid      map[string][]float64
	Curves    map[string]map[string]struct{ Treated, Control []float64 }
	Order     []string `json:"unadjusted_abs_smd_order"`
}

type diagInput struct {
	ps        []float64
	z         []bool
	inSupport []bool
	vars      []Variable
	adj       []NamedWeights
}

func readDiagInput(t *testing.T) diagInput {
	t.Helper()
	f, err := os.Open("../../testdata/report/diagnostics_input.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	col := map[string]int{}
	for j, h := range rows[0] {
		col[h] = j
	}
	num := func(r []string, name string) float64 {
		x, err := strconv.ParseFloat(r[col[name]], 64)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		return x
	}
	var in diagInput
	covs := []string{"age", "bmi", "visits", "smoker"}
	vals := make([][]float64, len(covs))
	var watt, wovl []float64
	for _, r := range rows[1:] {
		for k, c := range covs {
			vals[k] = append(vals[k], num(r, c))
		}
		in.z = append(in.z, num(r, "treated") == 1)
		in.ps = append(in.ps, num(r, "ps"))
		in.inSupport = append(in.inSupport, num(r, "in_support") == 1)
		watt = append(watt, num(r, "w_att"))
		wovl = append(wovl, num(r, "w_overlap"))
	}
	for k, c := range covs {
		in.vars = append(in.vars, Variable{Name: c, Values: vals[k], Binary: c == "smoker"})
	}
	in.adj = []NamedWeights{{Name: "unadjusted"}, {Name: "att", W: watt}, {Name: "overlap", W: wovl}}
	return in
}

func nearNum(t *testing.T, what string, got num.Num, want float64) {
	t.Helper()
	if math.Abs(float64(got)-want) > 1e-12*math.Max(1, math.Abs(want)) {
		t.Errorf("%s = %.15g, want %.15g", what, float64(got), want)
	}
}

// TestDiagnoseReference checks every number diagnose produces against
// numpy/scipy (testdata/report/diagnostics_ref.py).
func TestDiagnoseReference(t *testing.T) {
	in := readDiagInput(t)
	var ref diagRef
	b, err := os.ReadFile("../../testdata/report/diagnostics_ref.json")
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	d := Diagnose(in.ps, in.z, in.inSupport, in.vars, in.adj, 2)

	t.Run("scores", func(t *testing.T) {
		// numpy.histogram(..., density=True)
		want := []string{"unadjusted", "in support", "att", "overlap"}
		if len(d.Scores) != len(want) {
			t.Fatalf("%d score distributions, want %d", len(d.Scores), len(want))
		}
		for k, s := range d.Scores {
			if s.Adjustment != want[k] {
				t.Fatalf("score distribution %d is %q, want %q", k, s.Adjustment, want[k])
			}
			r := ref.Scores[s.Adjustment]
			for b := range ScoreBins {
				nearNum(t, fmt.Sprintf("%s treated bin %d", s.Adjustment, b), s.Treated[b], r.Treated[b])
				nearNum(t, fmt.Sprintf("%s control bin %d", s.Adjustment, b), s.Control[b], r.Control[b])
			}
		}
	})
	t.Run("distances", func(t *testing.T) {
		// numpy from the definition; scipy.stats.ks_2samp for the unadjusted max.
		if len(d.Distances) != len(in.vars)*len(in.adj) {
			t.Fatalf("%d distance rows", len(d.Distances))
		}
		for _, r := range d.Distances {
			w := ref.Distances[r.Covariate][r.Adjustment]
			nearNum(t, r.Covariate+" "+r.Adjustment+" max", r.Max, w.Max)
			nearNum(t, r.Covariate+" "+r.Adjustment+" mean", r.Mean, w.Mean)
			if r.Adjustment == "unadjusted" {
				nearNum(t, r.Covariate+" KS vs scipy", r.Max, ref.KSScipy[r.Covariate])
			}
		}
	})
	t.Run("curves", func(t *testing.T) {
		// numpy.quantile(method="inverted_cdf") grid; eCDFs from the definition.
		if len(d.Curves) != 2 {
			t.Fatalf("%d curves, want 2", len(d.Curves))
		}
		for k, c := range d.Curves {
			if c.Covariate != ref.Order[k] {
				t.Errorf("curve %d is %s, want %s (largest unadjusted |SMD| first)", k, c.Covariate, ref.Order[k])
			}
			g := ref.Grid[c.Covariate]
			if len(c.Grid) != len(g) {
				t.Fatalf("%s grid has %d points, want %d", c.Covariate, len(c.Grid), len(g))
			}
			for j := range g {
				nearNum(t, fmt.Sprintf("%s grid %d", c.Covariate, j), c.Grid[j], g[j])
			}
			for _, p := range c.Adjustments {
				r := ref.Curves[c.Covariate][p.Adjustment]
				for j := range g {
					nearNum(t, fmt.Sprintf("%s %s treated F(g%d)", c.Covariate, p.Adjustment, j), p.Treated[j], r.Treated[j])
					nearNum(t, fmt.Sprintf("%s %s control F(g%d)", c.Covariate, p.Adjustment, j), p.Control[j], r.Control[j])
				}
			}
		}
	})
}

// TestDiagnoseKSAgreesWithBalance: the max eCDF difference is the KS
// distance Prepared reports (same definition, separate code).
func TestDiagnoseKSAgreesWithBalance(t *testing.T) {
	in := readDiagInput(t)
	d := Diagnose(in.ps, in.z, nil, in.vars, in.adj, 0)
	prep := Prepare(in.vars, in.z, true)
	for a, adj := range in.adj {
		st := prep.Compute(adj.W)
		for k := range in.vars {
			nearNum(t, st[k].Label()+" "+adj.Name, d.Distances[k*len(in.adj)+a].Max, st[k].KS)
		}
	}
	if len(d.Curves) != DefaultWorst {
		t.Errorf("worst 0 gave %d curves, want DefaultWorst = %d", len(d.Curves), DefaultWorst)
	}
}

// TestQuantileGridPrivacy: every grid step covers at least ⌊n/100⌋ units
// and at least ten, as do the units above the top point, and neither
// extreme is shown (our own rule, see ECDFCurve).
func TestQuantileGridPrivacy(t *testing.T) {
	for _, n := range []int{15, 20, 99, 250, 1000, 12345} {
		t.Run(strconv.Itoa(n), func(t *testing.T) {
			r := rand.New(rand.NewPCG(uint64(n), 1))
			x := make([]float64, n)
			for i := range x {
				x[i] = r.NormFloat64() // distinct with probability 1
			}
			sorted := append([]float64(nil), x...)
			slices.Sort(sorted)
			g := quantileGrid(sorted)
			if n < 2*minQuantileUnits {
				if len(g) != 0 {
					t.Fatalf("n = %d gave %d grid points, want none", n, len(g))
				}
				return
			}
			prev := 0
			for _, q := range g {
				below := 0
				for _, v := range sorted {
					if v <= q {
						below++
					}
				}
				if step := below - prev; step < minQuantileUnits || step < n/100 {
					t.Errorf("grid step of %d units at %v (n = %d)", step, q, n)
				}
				prev = below
			}
			if above := n - prev; above < minQuantileUnits || above < n/100 {
				t.Errorf("only %d units above the top grid point", above)
			}
			if g[0] == sorted[0] || g[len(g)-1] == sorted[n-1] {
				t.Errorf("grid shows an extreme value")
			}
		})
	}
}

// BenchmarkDiagnose1M: a million units, three continuous covariates, four
// binary levels and five adjustments, as a report of a large run would ask.
func BenchmarkDiagnose1M(b *testing.B) {
	const n = 1_000_000
	r := rand.New(rand.NewPCG(1, 2))
	ps := make([]float64, n)
	z := make([]bool, n)
	in := make([]bool, n)
	var vars []Variable
	for k := range 7 {
		v := Variable{Name: fmt.Sprint("x", k), Values: make([]float64, n), Binary: k >= 3}
		vars = append(vars, v)
	}
	adj := []NamedWeights{{Name: "unadjusted"}}
	for k := range 4 {
		adj = append(adj, NamedWeights{Name: fmt.Sprint("w", k), W: make([]float64, n)})
	}
	for i := range n {
		for k, v := range vars {
			switch {
			case k == 0:
				v.Values[i] = r.NormFloat64()
			case k < 3:
				v.Values[i] = float64(r.IntN(90))
			default:
				v.Values[i] = float64(r.IntN(2))
			}
		}
		ps[i] = 1 / (1 + math.Exp(-vars[0].Values[i]))
		z[i] = r.Float64() < ps[i]
		in[i] = ps[i] > 0.02 && ps[i] < 0.98
		for _, a := range adj[1:] {
			a.W[i] = r.Float64()
		}
	}
	b.ResetTimer()
	for b.Loop() {
		Diagnose(ps, z, in, vars, adj, 3)
	}
	b.ReportMetric(float64(b.Elapsed().Milliseconds())/float64(b.N), "ms/report")
}
