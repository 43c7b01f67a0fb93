package main

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"time"

	"github.com/schollz/progressbar/v3"
)

// runStages are the stages a run reports, in order; the bar advances one
// step per stage (a stage's own progress is not observable cheaply).
var runStages = []string{"read", "fit", "match", "weight", "estimate", "publish"}

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
	bar   *progressbar.ProgressBar
	log   *slog.Logger
	name  string
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

// stage is study.Options.Stage: it closes the previous stage and opens
// the next.
func (p *progress) stage(name string) {
	p.finishStage()
	p.name, p.start = name, time.Now()
	if p.bar != nil {
		p.bar.Describe(name)
	}
}

func (p *progress) finishStage() {
	if p.name == "" {
		return
	}
	p.log.Info("stage done", "stage", p.name, "seconds", time.Since(p.start).Seconds())
	if p.bar != nil {
		_ = p.bar.Add(1)
	}
	p.name = ""
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
// stage is not reported done. It returns that stage's name.
func (p *progress) abort() string {
	name := p.name
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
