package warehousetest

import (
	"math"
	"net/url"
	"slices"
	"testing"
)

// TestCanonBits: the row-order tests are only as strict as Canon, so
// values that print alike but differ in bits must not compare equal.
func TestCanonBits(t *testing.T) {
	tenth, fifth := 0.1, 0.2 // variables: Go's constant arithmetic is exact
	for _, tc := range []struct {
		name string
		a, b any
		same bool
	}{
		{"0.1+0.2 vs 0.3", tenth + fifth, 0.3, false},
		{"next float", 1.0, math.Nextafter(1, 2), false},
		{"signed zero", 0.0, math.Copysign(0, -1), false},
		{"equal floats", 2.5, 2.5, true},
		{"NULL vs text NULL", nil, "NULL", true}, // documented: NULL renders as NULL
		{"int widths", int32(7), int64(7), true},
		{"bool", true, false, false},
	} {
		if got := Canon(tc.a) == Canon(tc.b); got != tc.same {
			t.Errorf("%s: Canon(%v) == Canon(%v) is %v, want %v", tc.name, tc.a, tc.b, got, tc.same)
		}
	}
}

// TestRowDiffAndPairs checks the counts the row-order failure messages
// quote on a hand-made example: two 1:1 runs where treated unit 1 keeps its
// control, unit 2 swaps to another and unit 3 is matched in one run only.
func TestRowDiffAndPairs(t *testing.T) {
	a := [][]any{
		{int64(1), int64(1), true, 1.0}, {int64(1), int64(11), false, 1.0},
		{int64(2), int64(2), true, 1.0}, {int64(2), int64(12), false, 1.0},
		{int64(3), int64(3), true, 1.0}, {int64(3), int64(13), false, 1.0},
	}
	b := [][]any{
		{int64(1), int64(1), true, 1.0}, {int64(1), int64(11), false, 1.0},
		{int64(2), int64(2), true, 1.0}, {int64(2), int64(14), false, 1.0},
	}
	if onlyA, onlyB := RowDiff(a, b); onlyA != 3 || onlyB != 1 {
		t.Errorf("RowDiff = %d, %d; want 3, 1", onlyA, onlyB)
	}
	if onlyA, onlyB := RowDiff(a, a); onlyA != 0 || onlyB != 0 {
		t.Errorf("RowDiff of a table with itself = %d, %d", onlyA, onlyB)
	}
	n, eg := PairsChanged(a, b)
	if n != 2 || !slices.Equal(eg, []string{"2", "3"}) {
		t.Errorf("PairsChanged = %d %v; want 2 [2 3]", n, eg)
	}
	// Renumbered sets with the same pairs are no change of pairs.
	renum := [][]any{
		{int64(9), int64(1), true, 1.0}, {int64(9), int64(11), false, 1.0},
		{int64(8), int64(2), true, 1.0}, {int64(8), int64(12), false, 1.0},
		{int64(7), int64(3), true, 1.0}, {int64(7), int64(13), false, 1.0},
	}
	if n, _ := PairsChanged(a, renum); n != 0 {
		t.Errorf("PairsChanged after renumbering sets = %d, want 0", n)
	}
	if got := OnlyIn(a, b, 2, 5); !slices.Equal(got, []string{"2/12", "3/3", "3/13"}) {
		t.Errorf("OnlyIn = %v", got)
	}
}

// TestParallelDSN: the options parameter must reach pgx as libpq's
// "-c name=value" list with real spaces (pgx unescapes the URL query as a
// path, so "+" would not become a space).
func TestParallelDSN(t *testing.T) {
	got := ParallelDSN("postgres://postgres@127.0.0.1:5432/db?sslmode=disable")
	u, err := url.Parse(got)
	if err != nil {
		t.Fatal(err)
	}
	opts, err := url.PathUnescape(u.Query().Get("options"))
	if err != nil {
		t.Fatal(err)
	}
	want := "-c parallel_setup_cost=0 -c parallel_tuple_cost=0 -c min_parallel_table_scan_size=0 -c min_parallel_index_scan_size=0 -c max_parallel_workers_per_gather=2 -c parallel_leader_participation=off"
	if opts != want || u.Query().Get("sslmode") != "disable" || u.Path != "/db" {
		t.Errorf("ParallelDSN = %s\noptions %q\nwant    %q", got, opts, want)
	}
	for _, c := range got {
		if c == '+' || c == ' ' {
			t.Fatalf("ParallelDSN = %s: spaces must be %%20", got)
		}
	}
}
