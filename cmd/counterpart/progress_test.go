package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"log/slog"
	"slices"
	"strings"
	"testing"
	"time"
)

// TestProgressPass checks that IRLS passes are logged only once the stage
// has run for passLogAfter, one record per pass.
func TestProgressPass(t *testing.T) {
	for _, tc := range []struct {
		name    string
		elapsed time.Duration
		want    int
	}{
		{"quiet early", passLogAfter / 2, 0},
		{"logged late", passLogAfter + time.Second, 3},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var buf bytes.Buffer
			p := newProgress(&buf, false, slog.New(slog.NewJSONHandler(&buf, nil)))
			p.stage("fit")
			p.start = time.Now().Add(-tc.elapsed)
			for i := 1; i <= 3; i++ {
				p.pass(i, 100/float64(i))
			}
			if got := strings.Count(buf.String(), `"msg":"fit pass"`); got != tc.want {
				t.Fatalf("%d pass records, want %d: %s", got, tc.want, buf.String())
			}
		})
	}
}

// TestProgressStageDone checks the "stage done" records: each carries the
// seconds the run reported for the stage (not the time since the stage
// was announced), a quiet part billed to another stage is logged without
// closing the open stage, and a signal between two stages names the last
// one begun.
func TestProgressStageDone(t *testing.T) {
	var buf bytes.Buffer
	p := newProgress(&buf, false, slog.New(slog.NewJSONHandler(&buf, nil)))
	p.stage("match")
	p.stageDone("support", 0.25) // a part inside match
	if p.name != "match" {
		t.Fatalf("a part closed the open stage: open %q", p.name)
	}
	p.stageDone("match", 1.5)
	p.stage("publish")
	p.stageDone("balance", 0.125)
	p.stageDone("publish", 2)
	var got []string
	for _, l := range strings.Split(strings.TrimSpace(buf.String()), "\n") {
		var rec struct {
			Msg     string  `json:"msg"`
			Stage   string  `json:"stage"`
			Seconds float64 `json:"seconds"`
		}
		if err := json.Unmarshal([]byte(l), &rec); err != nil || rec.Msg != "stage done" {
			t.Fatalf("record %q: %v", l, err)
		}
		got = append(got, fmt.Sprintf("%s=%g", rec.Stage, rec.Seconds))
	}
	want := []string{"support=0.25", "match=1.5", "balance=0.125", "publish=2"}
	if !slices.Equal(got, want) {
		t.Fatalf("stage done records %v, want %v", got, want)
	}
	if name := p.abort(); name != "publish" {
		t.Fatalf("abort between stages names %q, want the last stage begun, publish", name)
	}
}

// TestProgressOptionalStage: a stage outside runStages lengthens the bar
// by one step, so the bar is full only when the run ends.
func TestProgressOptionalStage(t *testing.T) {
	var buf bytes.Buffer
	p := newProgress(&buf, true, slog.New(discard{}))
	p.stage("read")
	p.stageDone("read", 0)
	p.stage("bootstrap")
	if got, want := p.bar.GetMax(), len(runStages)+1; got != want {
		t.Fatalf("bar of %d steps after an optional stage, want %d", got, want)
	}
}
