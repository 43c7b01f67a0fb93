package report

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"math"
	"os"
	"path/filepath"
	"testing"
	"time"

	"counterpart/match/study"
	"counterpart/warehouse"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/report")

// golden compares got with testdata/report/NAME, or rewrites it with -update.
func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	path := filepath.Join("..", "..", "testdata", "report", name)
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("%s differs (go test -update rewrites it):\n%s\nwant\n%s", name, got, want)
	}
}

// storedRun is a runs row as Publish writes it (see study.Run): the
// Summary as JSON, and its counts, gate and effects in their own columns.
func storedRun(t *testing.T, s *study.Summary) warehouse.RunRecord {
	t.Helper()
	enc := func(v any) string {
		b, err := json.Marshal(v)
		if err != nil {
			t.Fatal(err)
		}
		return string(b)
	}
	return warehouse.RunRecord{
		RunID: s.RunID, Study: s.Study, Status: s.Status, StartedAt: s.StartedAt, FinishedAt: s.FinishedAt,
		ToolVersion: s.ToolVersion, SpecSHA256: s.SpecSHA256, CohortFingerprint: s.Fingerprint, Engine: s.Engine,
		DBUser: "analyst", Message: s.Message,
		CountsJSON: enc(s.Counts),
		BalanceJSON: enc(struct {
			Gate        study.Gate                `json:"gate"`
			Adjustments []study.AdjustmentBalance `json:"adjustments"`
		}{s.Gate, s.Balance}),
		EffectsJSON: enc(s.Effects), SummaryJSON: enc(s),
	}
}

// runsFixture is two published runs of one study, the second with moved
// balance and effects, plus a failed run that stored no summary and one
// still running.
func runsFixture(t *testing.T) (a, b *study.Summary, recs []warehouse.RunRecord) {
	t.Helper()
	t0 := time.Date(2026, 11, 30, 2, 0, 0, 0, time.UTC)
	nan := study.Num(math.NaN())
	mk := func(id string, day int, smd, est study.Num) *study.Summary {
		return &study.Summary{
			Study: "hf_coaching", RunID: id, Status: "succeeded", Engine: "duckdb", ToolVersion: "0.1.0-test",
			SpecSHA256: "8d57", Fingerprint: "d52c",
			StartedAt: t0.AddDate(0, 0, day), FinishedAt: t0.AddDate(0, 0, day).Add(1500 * time.Millisecond),
			Counts:  study.Counts{Units: 20000, Treated: 2913, Control: 17087, MatchedTreated: 2872, MatchedControl: 2872},
			Model:   study.ModelSummary{Kind: "logistic", Iterations: 5, Converged: true, CStatistic: 0.717},
			Support: study.Support{Rule: "none"},
			Balance: []study.AdjustmentBalance{
				{Adjustment: "unadjusted", WorstSMD: 0.647, WorstVariable: "prior_admits"},
				{Adjustment: "matched", Pass: true, WorstSMD: -smd, WorstVariable: "region=valley"},
			},
			Gate:    study.Gate{Adjustment: "matched", Pass: true, SMDLimit: 0.1, VRLimit: 2, WorstSMD: -smd, WorstVariable: "region=valley"},
			Primary: "matched", Estimand: "att",
			Effects: []study.EffectRow{
				{Outcome: "readmit_30d", Adjustment: "unadjusted", Contrast: "difference", Estimate: 0.0473, CILow: 0.0303, CIHigh: 0.0643, EValue: nan, EValueCI: nan, RosenbaumGamma: nan},
				{Outcome: "readmit_30d", Adjustment: "matched", Contrast: "difference", Estimate: est, CILow: est - 0.02, CIHigh: est + 0.02, EValue: nan, EValueCI: nan, RosenbaumGamma: nan},
				{Outcome: "readmit_30d", Adjustment: "matched", Contrast: "risk_ratio", Estimate: 0.856, CILow: 0.79, CIHigh: 0.927, EValue: nan, EValueCI: nan, RosenbaumGamma: nan},
			},
			Timings: map[string]float64{"read": 0.5, "fit": 1},
		}
	}
	a = mk("run-a", 0, 0.036, -0.04248)
	b = mk("run-b", 1, 0.041, -0.0391)
	failed := warehouse.RunRecord{RunID: "run-c", Study: "hf_coaching", Status: "failed", StartedAt: t0.AddDate(0, 0, 2),
		FinishedAt: t0.AddDate(0, 0, 2).Add(time.Second), Message: "read cohort: no such table"}
	running := warehouse.RunRecord{RunID: "run-d", Study: "hf_coaching", Status: "running", StartedAt: t0.AddDate(0, 0, 3)}
	return a, b, []warehouse.RunRecord{running, failed, storedRun(t, b), storedRun(t, a)}
}

// TestRunViews pins the text of runs, runs show and runs diff (our own
// layout; cmd/counterpart's tests run the same functions end to end).
func TestRunViews(t *testing.T) {
	a, b, recs := runsFixture(t)
	var buf bytes.Buffer
	RunList(&buf, recs)
	golden(t, "runs_list.golden", buf.Bytes())

	buf.Reset()
	RunList(&buf, nil)
	if buf.String() != "no runs yet\n" {
		t.Errorf("empty list: %q", buf.String())
	}

	buf.Reset()
	sum, err := study.DecodeSummary(recs[2])
	if err != nil {
		t.Fatal(err)
	}
	RunDetail(&buf, recs[2], sum, TerminalOptions{})
	buf.WriteString("----\n")
	RunDetail(&buf, recs[1], nil, TerminalOptions{})
	golden(t, "runs_show.golden", buf.Bytes())

	buf.Reset()
	d := warehouse.RunDiff{A: a.RunID, B: b.RunID, Kept: 2800, Changed: 60, New: 12, Dropped: 3}
	RunDiff(&buf, recs[3], recs[2], d, a, b)
	buf.WriteString("----\n")
	RunDiff(&buf, recs[3], recs[1], d, a, nil)
	golden(t, "runs_diff.golden", buf.Bytes())
}

// TestDecodeSummary: a stored summary decodes to the Summary that was
// stored; a run without one is bad input that names the run.
func TestDecodeSummary(t *testing.T) {
	_, b, recs := runsFixture(t)
	got, err := study.DecodeSummary(recs[2])
	if err != nil {
		t.Fatal(err)
	}
	if got.RunID != b.RunID || got.Gate.WorstSMD != b.Gate.WorstSMD || len(got.Effects) != len(b.Effects) || !math.IsNaN(float64(got.Effects[0].EValue)) {
		t.Errorf("decoded %+v", got)
	}
	_, err = study.DecodeSummary(recs[1])
	if !errors.Is(err, warehouse.ErrBadInput) {
		t.Errorf("run without a summary: %v, want bad input", err)
	}
}

// TestHTMLWriteError: HTML returns the writer's error as it is, for the
// caller to name the step once.
func TestHTMLWriteError(t *testing.T) {
	errFull := errors.New("disk full")
	err := HTML(failingWriter{errFull}, &study.Summary{Study: "s"})
	if err != errFull {
		t.Errorf("HTML returned %v, want the writer's error unwrapped", err)
	}
}

type failingWriter struct{ err error }

func (f failingWriter) Write([]byte) (int, error) { return 0, f.err }
