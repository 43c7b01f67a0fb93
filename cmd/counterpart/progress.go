package main

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"slices"
	"time"

	"github.com/schollz/progressbar/v3"
)

// runStages are the stages every in-memory run reports, in order; the bar
// advances one step per stage (a stage's own progress is not observable
// cheaply). Some runs add stages (skip-check, prior, diagnostics,
// bootstrap) or report fewer (warehouse-scale mode: design, fit, support,
// match, estimate, publish); the bar fills when the run ends either way.
var runStages = []string{"read", "design", "fit", "support", "match", "weight", "balance", "estimate", "publish"}

// newLogger picks the log output: JSON lines when asked (for schedulers
// that parse logs), text on a terminal, nothing otherwise, so that an
// unattended run's stderr holds only the one-line error, if any.
func newLogger(format string, stderr io.Writer, tty bool) *slog.Logger {
	switch {
	case format == "json":
		return slog.New(slog.NewJSONHandler(stderr, nil))
	case format == "text" || tty:
		return slog.New(slog.NewTextHandler(stderr, nil))
	}
	return slog.New(discard{})
}

// discard is a handler that drops every record.
type discard struct{}

func (discard) Enabled(context.Context, slog.Level) bool  { return false }
func (discard) Handle(context.Context, slog.Record) error { return nil }
func (d discard) WithAttrs([]slog.Attr) slog.Handler      { return d }
func (d discard) WithGroup(string) slog.Handler           { return d }

// progress shows a run's stages: a bar on a terminal, log records
// everywhere logging is on.
type progress struct {
	bar  *progressbar.ProgressBar
	log  *slog.Logger
	name string
	// last is the stage begun last, open or not: what a cancellation
	// between two stages reports.
	last  string
	start time.Time
}

func newProgress(stderr io.Writer, tty bool, log *slog.Logger) *progress {
	p := &progress{log: log}
	if tty {
		p.bar = progressbar.NewOptions(len(runStages),
			progressbar.OptionSetWriter(stderr),
			progressbar.OptionSetDescription("starting"),
			progressbar.OptionClearOnFinish(),
			progressbar.OptionSetElapsedTime(true),
			progressbar.OptionSetWidth(24),
		)
	}
	return p
}

// stage is study.Options.Stage: it opens the next stage (closing one
// left open, which stageDone normally closed).
func (p *progress) stage(name string) {
	p.finishStage()
	p.name, p.last, p.start = name, name, time.Now()
	if p.bar != nil {
		// An optional stage (skip-check, prior, diagnostics, bootstrap)
		// lengthens the bar, so that it is not full before publishing.
		if !slices.Contains(runStages, name) {
			p.bar.ChangeMax(p.bar.GetMax() + 1)
		}
		p.bar.Describe(name)
	}
}

// stageDone is study.Options.StageDone: the "stage done" record carries
// the run's own seconds for the stage (the summary's stage_seconds), not
// the time since it was announced, which would include the work between
// stages. A quiet part billed to another stage (warehouse-scale balance
// inside publish) is logged but leaves the bar alone.
func (p *progress) stageDone(name string, seconds float64) {
	p.log.Info("stage done", "stage", name, "seconds", seconds)
	if name != p.name {
		return
	}
	if p.bar != nil {
		_ = p.bar.Add(1)
	}
	p.name = ""
}

// finishStage closes a stage the run did not report done.
func (p *progress) finishStage() {
	if p.name == "" {
		return
	}
	p.stageDone(p.name, time.Since(p.start).Seconds())
}

// passLogAfter is how long a fit runs silently: past it, every IRLS pass
// is logged, so that a long fit off a terminal still shows it is alive.
const passLogAfter = 10 * time.Second

// pass is study.Options.Pass: after passLogAfter in the stage, one log
// record per pass, and the pass on the bar.
func (p *progress) pass(n int, deviance float64) {
	if p.bar != nil {
		p.bar.Describe(fmt.Sprintf("%s (pass %d)", p.name, n))
	}
	if time.Since(p.start) >= passLogAfter {
		p.log.Info("fit pass", "stage", p.name, "pass", n, "deviance", deviance, "seconds", time.Since(p.start).Seconds())
	}
}

// abort ends the display of a run that was stopped: the interrupted
// stage is not reported done. It returns that stage's name (the last one
// begun, when the signal came between two).
func (p *progress) abort() string {
	name := p.name
	if name == "" {
		name = p.last
	}
	p.name = ""
	if p.bar != nil {
		_ = p.bar.Exit()
	}
	return name
}

// done ends the display; the bar clears itself so the summary follows.
func (p *progress) done() {
	p.finishStage()
	if p.bar != nil {
		_ = p.bar.Finish()
	}
}
