package scaletest

import (
	"context"
	"slices"
	"testing"

	"counterpart/warehouse"
)

// TestSampleDesign: the seed sample of warehouse-scale mode
// (warehouse.Sampler) on both engines is a deterministic subset of the
// units — the same rows twice, a sub-multiset of the full design
// (modulus 1), smaller than it for modulus 3 but not empty — and its
// design columns line up with the in-memory design (same values, column
// for column, as ReadCohort's dummies). Expectations are the definition
// of the sample (common practice: a hash of the id modulo m), no
// external reference.
func TestSampleDesign(t *testing.T) {
	sets := datasets(t)
	for _, mk := range []func(*testing.T, []dataset) engine{duckEngine, pgEngine} {
		eng := mk(t, sets)
		for _, d := range sets {
			t.Run(eng.name+"/"+d.name, func(t *testing.T) {
				ctx := context.Background()
				_, iw := eng.open(t)
				sm, ok := iw.(warehouse.Sampler)
				if !ok {
					t.Fatalf("%s has no Sampler", eng.name)
				}
				desc, err := iw.Describe(ctx, d.q)
				if err != nil {
					t.Fatal(err)
				}
				dsql, err := warehouse.NewDesignSQL(desc)
				if err != nil {
					t.Fatal(err)
				}
				rowsOf := func(x [][]float64, z []bool) [][]float64 {
					out := make([][]float64, len(z))
					for i := range z {
						r := []float64{0}
						if z[i] {
							r[0] = 1
						}
						for j := range x {
							r = append(r, x[j][i])
						}
						out[i] = r
					}
					slices.SortFunc(out, func(a, b []float64) int { return slices.Compare(a, b) })
					return out
				}
				fx, fz, err := sm.SampleDesign(ctx, d.q, dsql, 1)
				if err != nil {
					t.Fatal(err)
				}
				if len(fz) != desc.N || len(fx) != len(dsql.Columns) {
					t.Fatalf("modulus 1: %d rows × %d columns, want %d × %d", len(fz), len(fx), desc.N, len(dsql.Columns))
				}
				// The full design's column means are the Describe centres.
				for j, c := range dsql.Columns {
					var s float64
					for _, v := range fx[j] {
						s += v
					}
					if e := rel(s/float64(len(fz)), c.Center); e > 1e-12 {
						t.Errorf("column %s: sample mean %g, centre %g", c.Name, s/float64(len(fz)), c.Center)
					}
				}
				full := rowsOf(fx, fz)
				x1, z1, err := sm.SampleDesign(ctx, d.q, dsql, 3)
				if err != nil {
					t.Fatal(err)
				}
				x2, z2, err := sm.SampleDesign(ctx, d.q, dsql, 3)
				if err != nil {
					t.Fatal(err)
				}
				a, b := rowsOf(x1, z1), rowsOf(x2, z2)
				if len(a) == 0 || len(a) >= len(full) {
					t.Fatalf("modulus 3: %d of %d rows", len(a), len(full))
				}
				if !slices.EqualFunc(a, b, slices.Equal) {
					t.Errorf("modulus 3: two calls returned different samples")
				}
				// Sub-multiset of the full design: both sorted, merge.
				i := 0
				for _, r := range a {
					for i < len(full) && slices.Compare(full[i], r) < 0 {
						i++
					}
					if i == len(full) || !slices.Equal(full[i], r) {
						t.Fatalf("modulus 3: row %v is not a row of the full design", r)
					}
					i++
				}
			})
		}
	}
}
