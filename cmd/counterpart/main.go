// Command counterpart builds matched and weighted comparison cohorts inside
// a data warehouse. It only turns flags into a study run and errors into
// exit codes; the work is in package study and below.
package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"path/filepath"
	"strings"
	"syscall"
	"time"

	"github.com/urfave/cli/v2"
	"golang.org/x/term"

	"counterpart/match/report"
	"counterpart/match/study"
	"counterpart/warehouse"
)

// stageHook, when set, is called as each stage starts, after the
// progress display. Only the fault tests set it, to hold a run inside a
// chosen stage until they have signalled it; it is nil in the product.
var stageHook func(ctx context.Context, stage string)

// version is set at build time with -ldflags "-X main.version=...".
var version = "0.1.0-dev"

// Exit codes, documented in README.md and --help.
const (
	exitOK        = 0
	exitRuntime   = 1
	exitBadInput  = 2
	exitRejected  = 3
	exitLocked    = 4
	exitUnchanged = 5
	exitCancelled = 6
	exitBusy      = 7
)

const exitHelp = `EXIT CODES:
   0  success
   1  runtime or database error
   2  bad study file or bad input data (nothing written)
   3  balance gate rejected the run (recorded as rejected; current views untouched)
   4  another run of the same study holds the lock
   5  skipped: nothing changed since the last succeeded run (when asked for)
   6  cancelled by a signal (SIGTERM, SIGINT): rolled back, run marked cancelled;
      a second signal ends the process at once
   7  warehouse busy: another process holds the DuckDB file (retry later, or --wait)`

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	// The first signal cancels the run, which then rolls back and marks
	// its row; restoring the default handling right away lets a second
	// signal end the process at once, as an operator expects.
	context.AfterFunc(ctx, stop)
	code := run(ctx, os.Args, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// run is main without the process: tests call it with their own writers.
func run(ctx context.Context, args []string, stdout, stderr io.Writer) int {
	code := exitOK
	app := newApp(ctx, &code, stdout, stderr)
	if err := app.RunContext(ctx, hoistFlags(args, app)); err != nil {
		fmt.Fprintln(stderr, "counterpart: "+oneLine(err.Error()))
		return exitBadInput
	}
	return code
}

// newApp declares the commands; their actions set *code, the exit code
// run returns.
func newApp(ctx context.Context, code *int, stdout, stderr io.Writer) *cli.App {
	app := &cli.App{
		Name:  "counterpart",
		Usage: "matched and weighted comparison cohorts, built inside your warehouse",
		Description: "Reads a cohort with your SQL, fits propensity scores, matches and weights,\n" +
			"checks covariate balance, estimates effects and writes everything back\n" +
			"as tables and views. See README.md for the study file.",
		Version:               version,
		Writer:                stdout,
		ErrWriter:             stderr,
		HideHelpCommand:       true,
		CustomAppHelpTemplate: cli.AppHelpTemplate + "\n" + exitHelp + "\n",
		ExitErrHandler:        func(*cli.Context, error) {},
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "log-format", Usage: "log stages to stderr as `FORMAT` text or json (default: text on a terminal, nothing otherwise)"},
		},
		Commands: []*cli.Command{
			{
				Name:      "run",
				Usage:     "run a study and publish its tables",
				ArgsUsage: "STUDY.yaml",
				Flags: []cli.Flag{
					&cli.BoolFlag{Name: "dry-run", Usage: "validate, read, fit and match; write nothing"},
					&cli.BoolFlag{Name: "json", Usage: "print a machine-readable summary on stdout"},
					&cli.StringFlag{Name: "report", Usage: "also write the HTML report of this run to `FILE`"},
					&cli.BoolFlag{Name: "skip-unchanged", Usage: "exit 5 without writing when the cohort and study are unchanged since the last succeeded run"},
					&cli.DurationFlag{Name: "wait", Usage: "when another process holds the warehouse file, retry for up to `DURATION` (e.g. 10m) before exiting 7"},
				},
				Action: func(c *cli.Context) error {
					if c.NArg() != 1 {
						return usageError("run takes one study file: counterpart run STUDY.yaml")
					}
					f := runFlags{dry: c.Bool("dry-run"), json: c.Bool("json"), report: c.String("report"), logFormat: c.String("log-format"), skip: c.Bool("skip-unchanged"), wait: c.Duration("wait")}
					if f.wait < 0 {
						return usageError(fmt.Sprintf("--wait %s: give a duration >= 0", f.wait))
					}
					if f.logFormat != "" && f.logFormat != "text" && f.logFormat != "json" {
						return usageError(fmt.Sprintf("--log-format %q: use text or json", f.logFormat))
					}
					*code = runStudy(ctx, c.Args().First(), f, stdout, stderr)
					return nil
				},
			},
			{
				Name:  "demo",
				Usage: "write a synthetic warehouse and study, run it, and compare with the planted effect",
				Flags: []cli.Flag{
					&cli.StringFlag{Name: "dir", Value: "demo", Usage: "directory for the demo warehouse and study file"},
					&cli.IntFlag{Name: "units", Value: 20000, Usage: "number of synthetic members"},
					&cli.Uint64Flag{Name: "seed", Value: 1, Usage: "seed of the synthetic data"},
				},
				Action: func(c *cli.Context) error {
					if c.NArg() > 0 {
						return usageError(fmt.Sprintf("demo takes no argument (got %q): counterpart demo [--dir DIR]", c.Args().First()))
					}
					*code = runDemo(ctx, c.String("dir"), c.Int("units"), c.Uint64("seed"), stdout, stderr)
					return nil
				},
			},
		},
	}
	app.Commands = append(app.Commands, runsCommands(ctx, code, stdout, stderr)...)
	return app
}

type usageError string

func (u usageError) Error() string { return string(u) }

// exitCode maps an error to the documented exit codes.
func exitCode(err error) int {
	switch {
	case err == nil:
		return exitOK
	case errors.Is(err, warehouse.ErrLocked):
		return exitLocked
	case errors.Is(err, warehouse.ErrBusy):
		return exitBusy
	case errors.Is(err, study.ErrRejected):
		return exitRejected
	case errors.Is(err, study.ErrUnchanged):
		return exitUnchanged
	case errors.Is(err, warehouse.ErrBadInput):
		return exitBadInput
	default:
		return exitRuntime
	}
}

// oneLine keeps stderr to one line per error, as schedulers' logs expect.
func oneLine(s string) string {
	s = strings.ReplaceAll(s, "\r", " ")
	s = strings.ReplaceAll(s, "\n", " ")
	s = strings.ReplaceAll(s, warehouse.ErrBadInput.Error()+": ", "")
	return s
}

// runFlags are the switches of the run command.
type runFlags struct {
	dry, json, skip bool
	report          string
	logFormat       string
	// wait is how long a busy warehouse is retried (--wait).
	wait time.Duration
}

// fail prints an error as the one stderr line schedulers read (a JSON
// record when logs are JSON) and returns its exit code.
func fail(stderr io.Writer, logFormat string, err error) int {
	code := exitCode(err)
	if logFormat == "json" {
		slog.New(slog.NewJSONHandler(stderr, nil)).Error(oneLine(err.Error()), "exit_code", code)
	} else {
		fmt.Fprintln(stderr, "counterpart: "+oneLine(err.Error()))
	}
	return code
}

func runStudy(ctx context.Context, path string, f runFlags, stdout, stderr io.Writer) int {
	spec, err := study.Load(path)
	if err != nil {
		return fail(stderr, f.logFormat, err)
	}
	if f.report == "" {
		f.report = spec.Output.Report
	}
	return execute(ctx, spec, f, stdout, stderr)
}

func execute(ctx context.Context, spec *study.Spec, f runFlags, stdout, stderr io.Writer) int {
	dry, asJSON := f.dry, f.json
	tty := isTTY(stderr)
	log := newLogger(f.logFormat, stderr, tty)
	wh, err := study.OpenWith(ctx, spec, warehouse.OpenOptions{ReadOnly: dry, Wait: f.wait,
		OnBusy: func(err error, wait time.Duration) {
			// Said even with logging off: a scheduler's log should show
			// why the run started late.
			if !log.Enabled(ctx, slog.LevelWarn) {
				fmt.Fprintf(stderr, "counterpart: warehouse busy, waiting up to %s: %s\n", wait, oneLine(err.Error()))
				return
			}
			log.Warn("warehouse busy, waiting", "study", spec.Study, "wait", wait.String(), "error", oneLine(err.Error()))
		}})
	if err != nil {
		return fail(stderr, f.logFormat, err)
	}
	defer wh.Close()
	log.Info("run starting", "study", spec.Study, "engine", spec.Warehouse.Engine, "dry_run", dry)
	prog := newProgress(stderr, tty && f.logFormat == "", log)
	sum, err := study.Run(ctx, spec, wh, study.Options{DryRun: dry, ToolVersion: version, Diagnostics: f.report != "",
		Stage: func(name string) {
			prog.stage(name)
			if stageHook != nil {
				stageHook(ctx, name)
			}
		}, StageDone: prog.stageDone, Pass: prog.pass, SkipUnchanged: f.skip})
	if err != nil && ctx.Err() != nil {
		// Whatever error the stage or the engine made of it, a run that
		// ends after a signal was cancelled.
		return cancelled(stderr, f.logFormat, log, prog.abort(), sum)
	}
	prog.done()
	if sum != nil && sum.Status != "" {
		log.Info("run finished", "study", spec.Study, "run_id", sum.RunID, "status", sum.Status)
	}
	if f.report != "" && sum != nil && sum.Status != "" && sum.Status != "skipped" {
		if rerr := writeReport(f.report, sum); rerr != nil && err == nil {
			return fail(stderr, f.logFormat, rerr)
		}
	}
	if asJSON && sum != nil && (err == nil || errors.Is(err, study.ErrRejected)) {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if e := enc.Encode(sum); e != nil {
			fmt.Fprintln(stderr, "counterpart: write summary: "+e.Error())
			return exitRuntime
		}
	} else if sum != nil && (err == nil || errors.Is(err, study.ErrRejected)) {
		printSummary(stdout, sum)
	}
	if err != nil {
		return fail(stderr, f.logFormat, err)
	}
	return exitOK
}

// cancelled reports a run a signal stopped, once, at WARN: a JSON record
// with --log-format json, a text record when logging is on, else the one
// stderr line; and returns exit 6. stage is the stage it stopped in.
func cancelled(stderr io.Writer, logFormat string, log *slog.Logger, stage string, sum *study.Summary) int {
	msg := "cancelled by a signal"
	if stage != "" {
		msg += " during " + stage
	}
	if sum != nil && sum.Status == warehouse.StatusCancelled {
		msg += "; run " + sum.RunID + " marked cancelled, nothing published"
	} else {
		msg += "; nothing published"
	}
	switch {
	case logFormat == "json":
		slog.New(slog.NewJSONHandler(stderr, nil)).Warn(msg, "exit_code", exitCancelled, "stage", stage)
	case log.Enabled(context.Background(), slog.LevelWarn):
		log.Warn(msg, "exit_code", exitCancelled, "stage", stage)
	default:
		fmt.Fprintln(stderr, "counterpart: "+msg)
	}
	return exitCancelled
}

// writeReport writes the HTML report atomically: a reader never sees half
// a file, and a failed render leaves the previous report in place.
func writeReport(path string, sum *study.Summary) error {
	tmp, err := os.CreateTemp(filepath.Dir(path), ".report-*.html")
	if err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	defer os.Remove(tmp.Name())
	if err := report.HTML(tmp, sum); err != nil {
		tmp.Close()
		return fmt.Errorf("write report: %w", err)
	}
	if err := tmp.Close(); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	if err := os.Chmod(tmp.Name(), 0o644); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("write report: %w", err)
	}
	return nil
}

func printSummary(w io.Writer, sum *study.Summary) {
	report.Terminal(w, sum, report.TerminalOptions{Color: isTTY(w)})
}

func isTTY(w io.Writer) bool {
	f, ok := w.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}
