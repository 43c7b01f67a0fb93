package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// TestDemoCommand runs the README's first command end to end on a small
// cohort: exit 0, the summary, the truth comparison and the caution.
func TestDemoCommand(t *testing.T) {
	dir := t.TempDir()
	var out, errb bytes.Buffer
	code := run(context.Background(), []string{"counterpart", "demo", "--dir", dir, "--units", "3000"}, &out, &errb)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	for _, want := range []string{"planted truth", "naive difference", "matched estimate", "no unmeasured confounding", "cost_90d"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("demo output lacks %q", want)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "hf_coaching.yaml")); err != nil {
		t.Errorf("study file not written: %v", err)
	}
}

// TestRunJSONAndDryRun: --json prints one parseable summary and nothing
// else; --dry-run writes nothing (the warehouse file is unchanged).
func TestRunJSONAndDryRun(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"counterpart", "demo", "--dir", dir, "--units", "1500"}, &out, &errb); code != exitOK {
		t.Fatalf("demo exit %d: %s", code, errb.String())
	}
	study := filepath.Join(dir, "hf_coaching.yaml")
	db := filepath.Join(dir, "warehouse.duckdb")

	before := fileHash(t, db)
	out.Reset()
	errb.Reset()
	if code := run(ctx, []string{"counterpart", "run", "--dry-run", "--json", study}, &out, &errb); code != exitOK {
		t.Fatalf("dry run exit %d: %s", code, errb.String())
	}
	var sum struct {
		Status  string `json:"status"`
		DryRun  bool   `json:"dry_run"`
		Effects []struct {
			Outcome string   `json:"outcome"`
			CILow   *float64 `json:"ci_low"`
		} `json:"effects"`
	}
	if err := json.Unmarshal(out.Bytes(), &sum); err != nil {
		t.Fatalf("--json output is not one JSON document: %v\n%s", err, out.String())
	}
	if !sum.DryRun || sum.Status != "dry-run" || len(sum.Effects) == 0 {
		t.Errorf("dry-run summary: %+v", sum)
	}
	if fileHash(t, db) != before {
		t.Errorf("--dry-run changed the warehouse file")
	}

	out.Reset()
	errb.Reset()
	if code := run(ctx, []string{"counterpart", "run", "--json", study}, &out, &errb); code != exitOK {
		t.Fatalf("run exit %d: %s", code, errb.String())
	}
	if err := json.Unmarshal(out.Bytes(), &sum); err != nil || sum.Status != "succeeded" {
		t.Errorf("run summary status %q (%v)", sum.Status, err)
	}
	if errb.Len() != 0 {
		t.Errorf("stderr not empty on success: %q", errb.String())
	}
}

// TestHelpListsExitCodes: schedulers' authors read --help.
func TestHelpListsExitCodes(t *testing.T) {
	var out, errb bytes.Buffer
	run(context.Background(), []string{"counterpart", "--help"}, &out, &errb)
	for _, want := range []string{"EXIT CODES", "3  balance gate rejected", "4  another run", "7  warehouse busy"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("--help lacks %q", want)
		}
	}
}

// TestLogFormatJSON: with --log-format json every stderr line is one JSON
// record (schedulers parse them), and the failure of an unchanged rerun
// arrives as one error record carrying the exit code.
func TestLogFormatJSON(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"counterpart", "demo", "--dir", dir, "--units", "2500"}, &out, &errb); code != exitOK {
		t.Fatalf("demo: %s", errb.String())
	}
	errb.Reset()
	code := run(ctx, []string{"counterpart", "--log-format", "json", "run", "--skip-unchanged", filepath.Join(dir, "hf_coaching.yaml")}, &out, &errb)
	if code != exitUnchanged {
		t.Fatalf("exit %d, want %d: %s", code, exitUnchanged, errb.String())
	}
	lines := strings.Split(strings.TrimSpace(errb.String()), "\n")
	var last map[string]any
	for _, l := range lines {
		if err := json.Unmarshal([]byte(l), &last); err != nil {
			t.Fatalf("stderr line is not JSON: %q", l)
		}
	}
	if last["level"] != "ERROR" || last["exit_code"] != float64(exitUnchanged) {
		t.Errorf("last record %v, want an ERROR with exit_code 5", last)
	}
}

// TestLogFormatJSONStages: a published run's "stage done" records name
// every stage of runStages in order, each with the seconds the --json
// summary's stage_seconds holds for it, and those seconds add up to no
// more than the run's wall time (started_at to finished_at).
func TestLogFormatJSONStages(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	var out, errb bytes.Buffer
	if code := run(ctx, []string{"counterpart", "demo", "--dir", dir, "--units", "1500"}, &out, &errb); code != exitOK {
		t.Fatalf("demo: %s", errb.String())
	}
	out.Reset()
	errb.Reset()
	if code := run(ctx, []string{"counterpart", "--log-format", "json", "run", "--json", filepath.Join(dir, "hf_coaching.yaml")}, &out, &errb); code != exitOK {
		t.Fatalf("run exit %d: %s", code, errb.String())
	}
	var sum struct {
		StartedAt  time.Time          `json:"started_at"`
		FinishedAt time.Time          `json:"finished_at"`
		Timings    map[string]float64 `json:"stage_seconds"`
	}
	if err := json.Unmarshal(out.Bytes(), &sum); err != nil {
		t.Fatal(err)
	}
	var stages []string
	for _, l := range strings.Split(strings.TrimSpace(errb.String()), "\n") {
		var rec struct {
			Msg     string  `json:"msg"`
			Stage   string  `json:"stage"`
			Seconds float64 `json:"seconds"`
		}
		if err := json.Unmarshal([]byte(l), &rec); err != nil {
			t.Fatalf("stderr line is not JSON: %q", l)
		}
		if rec.Msg != "stage done" {
			continue
		}
		stages = append(stages, rec.Stage)
		if sec, ok := sum.Timings[rec.Stage]; !ok || sec != rec.Seconds {
			t.Errorf("stage done %s: %v s, stage_seconds has %v (%v)", rec.Stage, rec.Seconds, sec, ok)
		}
	}
	k := 0
	for _, st := range stages {
		if k < len(runStages) && st == runStages[k] {
			k++
		}
	}
	if k != len(runStages) {
		t.Errorf("stage done records %v do not hold %v in order", stages, runStages)
	}
	total := 0.0
	for _, sec := range sum.Timings {
		total += sec
	}
	if wall := sum.FinishedAt.Sub(sum.StartedAt).Seconds(); total > wall+1e-9 {
		t.Errorf("stages sum to %v s, more than the run's wall time %v s", total, wall)
	}
}
