package study

import (
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"slices"
	"sort"
	"sync"
	"testing"
	"time"

	_ "github.com/duckdb/duckdb-go/v2"

	"counterpart/warehouse"
	"counterpart/warehouse/duckdb"
	"counterpart/warehouse/warehousetest"
)

// tickClock is a run clock that moves one millisecond per reading, from
// now: every stage interval then has a length, so that disjointness and
// containment are checked on intervals that are not empty, and no check
// depends on how fast the machine is. Safe for the fingerprint goroutine.
type tickClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *tickClock) now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(time.Millisecond)
	return c.t
}

// micros turns a stage offset in seconds into whole microseconds, the clock's
// resolution, so that interval ends compare exactly.
func micros(sec float64) int64 { return int64(math.Round(sec * 1e6)) }

// TestStageTimingsDisjoint runs the benchmark study (3,000 units) on
// DuckDB in both modes and checks the timings: every expected stage is
// there and announced in order; the stages' intervals are disjoint and lie
// inside the run; stage_seconds are their sums and add up to at most the
// wall time; the fingerprint hash is reported as overlapping, never in a
// stage; each "stage done" carries the stage's own seconds; and the runs
// row ends after the publish stage and agrees with its stored summary.
func TestStageTimingsDisjoint(t *testing.T) {
	dsn := filepath.Join(t.TempDir(), "timings.duckdb")
	db, err := sql.Open("duckdb", dsn)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.Exec(warehousetest.BenchCohortSQL(3000)); err != nil {
		t.Fatal(err)
	}
	db.Close()
	for _, tc := range []struct {
		mode      string
		announced []string
		parts     []string // billed inside another stage
	}{
		{"memory", []string{"read", "design", "fit", "support", "match", "weight", "balance", "estimate", "publish"}, nil},
		{"warehouse", []string{"design", "fit", "support", "match", "estimate", "publish"}, []string{"balance"}},
	} {
		t.Run(tc.mode, func(t *testing.T) {
			ctx := context.Background()
			text := fmt.Sprintf(warehousetest.BenchStudy, dsn)
			text = mustReplace(t, text, "bench_run_", "t_"+tc.mode+"_")
			text = mustReplace(t, text, "\nmatching:", "\nscore:\n  fit_in: "+tc.mode+"\nmatching:")
			s, err := Parse("bench.yaml", []byte(text), nil)
			if err != nil {
				t.Fatal(err)
			}
			wh, err := duckdb.Open(ctx, dsn)
			if err != nil {
				t.Fatal(err)
			}
			defer wh.Close()
			clk := &tickClock{t: time.Now().UTC()}
			var began []string
			done := map[string]float64{}
			sum, err := Run(ctx, s, wh, Options{Now: clk.now,
				Stage:     func(name string) { began = append(began, name) },
				StageDone: func(name string, sec float64) { done[name] = sec }})
			if err != nil {
				t.Fatal(err)
			}
			if !slices.Equal(began, tc.announced) {
				t.Errorf("stages announced %v, want %v", began, tc.announced)
			}
			for _, name := range append(slices.Clone(tc.announced), tc.parts...) {
				sec, ok := sum.Timings[name]
				if !ok {
					t.Errorf("stage %s missing from stage_seconds %v", name, sum.Timings)
				}
				if done[name] != sec {
					t.Errorf("stage %s: stage done said %v s, stage_seconds %v s", name, done[name], sec)
				}
			}
			wall := micros(sum.FinishedAt.Sub(sum.StartedAt).Seconds())
			checkIntervals(t, sum, wall)
			if tc.mode == "memory" {
				if _, ok := sum.Overlapping["fingerprint"]; !ok {
					t.Errorf("no overlapping fingerprint time: %v", sum.Overlapping)
				}
				if _, ok := sum.Timings["fingerprint"]; ok {
					t.Errorf("the concurrent fingerprint hash is billed as a stage: %v", sum.Timings)
				}
			}
			checkRunsRow(t, ctx, wh, s, sum)
		})
	}
}

// checkIntervals checks the stage list against stage_seconds and the
// run's wall time (µs).
func checkIntervals(t *testing.T, sum *Summary, wall int64) {
	t.Helper()
	var seq []StageTime
	perStage := map[string]int64{}
	for _, st := range sum.Stages {
		from, to := micros(st.Start), micros(st.Start+st.Seconds)
		if from < 0 || to > wall || to < from {
			t.Errorf("%s interval [%d, %d] µs lies outside the run's [0, %d]", st.Name, from, to, wall)
		}
		if !st.Overlaps {
			seq = append(seq, st)
			perStage[st.Name] += to - from
		}
	}
	sort.Slice(seq, func(i, j int) bool { return seq[i].Start < seq[j].Start })
	for i := 1; i < len(seq); i++ {
		prevEnd := micros(seq[i-1].Start + seq[i-1].Seconds)
		if micros(seq[i].Start) < prevEnd {
			t.Errorf("%s starts at %d µs, before %s ends at %d µs", seq[i].Name, micros(seq[i].Start), seq[i-1].Name, prevEnd)
		}
	}
	var total int64
	for name, sec := range sum.Timings {
		if got := perStage[name]; got != micros(sec) {
			t.Errorf("%s: stage_seconds %v, its intervals sum to %d µs", name, sec, got)
		}
		total += micros(sec)
	}
	if total > wall {
		t.Errorf("stages sum to %d µs, more than the run's wall time %d µs", total, wall)
	}
	if len(seq) == 0 || seq[len(seq)-1].Name != "publish" {
		t.Fatalf("the last interval is not publish: %+v", seq)
	}
}

// checkRunsRow reads the run's row as `counterpart runs` does and checks
// that its finished_at is not before the publish stage's end, so that its
// duration contains publishing, and that the summary stored in the row
// carries the same finish time and the publish stage.
func checkRunsRow(t *testing.T, ctx context.Context, wh warehouse.Warehouse, s *Spec, sum *Summary) {
	t.Helper()
	recs, err := wh.Runs(ctx, s.OutputTarget(), 1)
	if err != nil || len(recs) != 1 || recs[0].RunID != sum.RunID {
		t.Fatalf("runs: %v %+v", err, recs)
	}
	r := recs[0]
	var publishEnd time.Time
	for _, st := range sum.Stages {
		if st.Name == "publish" {
			publishEnd = sum.StartedAt.Add(time.Duration(micros(st.Start+st.Seconds)) * time.Microsecond)
		}
	}
	if r.FinishedAt.Before(publishEnd) {
		t.Errorf("runs row finished_at %v is before the publish stage's end %v", r.FinishedAt, publishEnd)
	}
	if !r.StartedAt.Equal(sum.StartedAt) || !r.FinishedAt.Equal(sum.FinishedAt) {
		t.Errorf("runs row %v–%v, summary %v–%v", r.StartedAt, r.FinishedAt, sum.StartedAt, sum.FinishedAt)
	}
	var stored Summary
	if err := json.Unmarshal([]byte(r.SummaryJSON), &stored); err != nil {
		t.Fatalf("stored summary: %v", err)
	}
	if !stored.FinishedAt.Equal(r.FinishedAt) {
		t.Errorf("stored summary finished_at %v, runs row %v", stored.FinishedAt, r.FinishedAt)
	}
	if stored.Timings["publish"] != sum.Timings["publish"] {
		t.Errorf("stored publish seconds %v, the run's %v", stored.Timings["publish"], sum.Timings["publish"])
	}
	checkIntervals(t, &stored, micros(r.FinishedAt.Sub(r.StartedAt).Seconds()))
}
