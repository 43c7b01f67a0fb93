package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"text/tabwriter"
	"time"

	"github.com/urfave/cli/v2"

	"counterpart/match/report"
	"counterpart/match/study"
	"counterpart/warehouse"
)

// studyFlag names the study whose runs a command reads.
var studyFlag = &cli.StringFlag{Name: "study", Usage: "the study file (`STUDY.yaml`) whose warehouse and tables to read (required)"}

// runsCommands lists, shows and compares published runs, and renders a
// stored run's report. They only read: the warehouse is opened read-only.
func runsCommands(ctx context.Context, code *int, stdout, stderr io.Writer) []*cli.Command {
	withStudy := func(c *cli.Context, f func(*study.Spec, warehouse.Warehouse) error) error {
		if c.String("study") == "" {
			*code = fail(stderr, c.String("log-format"), fmt.Errorf("%w: %s needs --study STUDY.yaml", warehouse.ErrBadInput, c.Command.FullName()))
			return nil
		}
		spec, err := study.Load(c.String("study"))
		if err != nil {
			*code = fail(stderr, c.String("log-format"), err)
			return nil
		}
		wh, err := study.Open(ctx, spec, true)
		if err != nil {
			*code = fail(stderr, c.String("log-format"), err)
			return nil
		}
		defer wh.Close()
		if err := f(spec, wh); err != nil {
			*code = fail(stderr, c.String("log-format"), err)
		}
		return nil
	}
	resolve := func(ctx context.Context, wh warehouse.Warehouse, out warehouse.Output, id string) (warehouse.RunRecord, error) {
		if id == "" || id == "latest" {
			rec, ok, err := wh.LatestSucceeded(ctx, out)
			if err == nil && !ok {
				err = fmt.Errorf("%w: no succeeded run of study %s yet", warehouse.ErrBadInput, out.Study)
			}
			if err != nil {
				return rec, err
			}
			id = rec.RunID
		}
		return wh.Run(ctx, out, id)
	}
	return []*cli.Command{
		{
			Name:  "runs",
			Usage: "list a study's runs (newest first)",
			Flags: []cli.Flag{studyFlag, &cli.IntFlag{Name: "limit", Value: 20, Usage: "how many runs to list (0: all)"}},
			Action: func(c *cli.Context) error {
				return withStudy(c, func(spec *study.Spec, wh warehouse.Warehouse) error {
					recs, err := wh.Runs(ctx, spec.OutputTarget(), c.Int("limit"))
					if err != nil {
						return fmt.Errorf("list runs: %w", err)
					}
					printRuns(stdout, recs)
					return nil
				})
			},
			Subcommands: []*cli.Command{
				{
					Name:      "show",
					Usage:     "show one run's lineage and summary",
					ArgsUsage: "[RUN|latest]",
					Flags:     []cli.Flag{studyFlag},
					Action: func(c *cli.Context) error {
						return withStudy(c, func(spec *study.Spec, wh warehouse.Warehouse) error {
							rec, err := resolve(ctx, wh, spec.OutputTarget(), c.Args().First())
							if err != nil {
								return fmt.Errorf("show run: %w", err)
							}
							showRun(stdout, rec)
							return nil
						})
					},
				},
				{
					Name:      "diff",
					Usage:     "compare two runs: matched sets kept, changed and new; balance and effect drift",
					ArgsUsage: "A B",
					Flags:     []cli.Flag{studyFlag},
					Action: func(c *cli.Context) error {
						if c.NArg() != 2 {
							*code = fail(stderr, c.String("log-format"), fmt.Errorf("%w: runs diff takes two run ids: counterpart runs diff --study S A B", warehouse.ErrBadInput))
							return nil
						}
						return withStudy(c, func(spec *study.Spec, wh warehouse.Warehouse) error {
							out := spec.OutputTarget()
							a, err := resolve(ctx, wh, out, c.Args().Get(0))
							if err != nil {
								return fmt.Errorf("runs diff: %w", err)
							}
							b, err := resolve(ctx, wh, out, c.Args().Get(1))
							if err != nil {
								return fmt.Errorf("runs diff: %w", err)
							}
							d, err := wh.DiffRuns(ctx, out, a.RunID, b.RunID)
							if err != nil {
								return fmt.Errorf("runs diff: %w", err)
							}
							printDiff(stdout, a, b, d)
							return nil
						})
					},
				},
			},
		},
		{
			Name:      "report",
			Usage:     "write the HTML report of a stored run",
			ArgsUsage: "[RUN|latest]",
			Flags:     []cli.Flag{studyFlag, &cli.StringFlag{Name: "out", Value: "report.html", Usage: "HTML `FILE` to write"}},
			Action: func(c *cli.Context) error {
				return withStudy(c, func(spec *study.Spec, wh warehouse.Warehouse) error {
					rec, err := resolve(ctx, wh, spec.OutputTarget(), c.Args().First())
					if err != nil {
						return fmt.Errorf("report: %w", err)
					}
					sum, err := decodeSummary(rec)
					if err != nil {
						return err
					}
					if err := writeReport(c.String("out"), sum); err != nil {
						return err
					}
					fmt.Fprintf(stdout, "wrote %s (run %s)\n", c.String("out"), rec.RunID)
					return nil
				})
			},
		},
	}
}

// decodeSummary reads the summary a run stored; runs published before the
// summary column existed have none.
func decodeSummary(rec warehouse.RunRecord) (*study.Summary, error) {
	if rec.SummaryJSON == "" {
		return nil, fmt.Errorf("report: %w: run %s has no stored summary (status %s); rerun the study", warehouse.ErrBadInput, rec.RunID, rec.Status)
	}
	var sum study.Summary
	if err := json.Unmarshal([]byte(rec.SummaryJSON), &sum); err != nil {
		return nil, fmt.Errorf("report: decode summary of run %s: %w", rec.RunID, err)
	}
	return &sum, nil
}

// runDigest is what the runs list needs from a run's JSON columns.
type runDigest struct {
	units, treated, matched int
	worst                   float64
	headline                string
}

func digest(rec warehouse.RunRecord) runDigest {
	d := runDigest{worst: math.NaN()}
	var counts study.Counts
	if json.Unmarshal([]byte(rec.CountsJSON), &counts) == nil {
		d.units, d.treated, d.matched = counts.Units, counts.Treated, counts.MatchedTreated
	}
	var bal struct {
		Gate study.Gate `json:"gate"`
	}
	if json.Unmarshal([]byte(rec.BalanceJSON), &bal) == nil {
		d.worst = math.Abs(float64(bal.Gate.WorstSMD))
	}
	var effects []study.EffectRow
	if json.Unmarshal([]byte(rec.EffectsJSON), &effects) == nil {
		var sum struct {
			Primary string `json:"headline_adjustment"`
		}
		_ = json.Unmarshal([]byte(rec.SummaryJSON), &sum)
		for _, e := range effects {
			if e.Contrast == "difference" && (e.Adjustment == sum.Primary || (sum.Primary == "" && e.Adjustment != "unadjusted")) {
				d.headline = fmt.Sprintf("%s %+.4g [%+.4g, %+.4g]", e.Outcome, float64(e.Estimate), float64(e.CILow), float64(e.CIHigh))
				break
			}
		}
	}
	return d
}

func printRuns(w io.Writer, recs []warehouse.RunRecord) {
	if len(recs) == 0 {
		fmt.Fprintln(w, "no runs yet")
		return
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "run\tstatus\tstarted (UTC)\tseconds\tunits\ttreated\tmatched\tworst |SMD|\theadline effect")
	for _, r := range recs {
		d := digest(r)
		secs := ""
		if !r.FinishedAt.IsZero() {
			secs = fmt.Sprintf("%.1f", r.FinishedAt.Sub(r.StartedAt).Seconds())
		}
		worst := ""
		if !math.IsNaN(d.worst) {
			worst = fmt.Sprintf("%.3f", d.worst)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d\t%d\t%d\t%s\t%s\n", r.RunID, r.Status, r.StartedAt.UTC().Format(time.DateTime), secs,
			d.units, d.treated, d.matched, worst, d.headline)
	}
	tw.Flush()
}

func showRun(w io.Writer, r warehouse.RunRecord) {
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	for _, kv := range [][2]string{
		{"run", r.RunID}, {"study", r.Study}, {"status", r.Status},
		{"started", r.StartedAt.UTC().Format(time.RFC3339)}, {"finished", finished(r.FinishedAt)},
		{"tool version", r.ToolVersion}, {"engine", r.Engine}, {"database user", r.DBUser},
		{"study file sha256", r.SpecSHA256}, {"cohort fingerprint", r.CohortFingerprint}, {"message", r.Message},
	} {
		if kv[1] != "" {
			fmt.Fprintf(tw, "%s\t%s\n", kv[0], kv[1])
		}
	}
	tw.Flush()
	if sum, err := decodeSummary(r); err == nil {
		fmt.Fprintln(w)
		report.Terminal(w, sum, report.TerminalOptions{Color: isTTY(w)})
	}
}

func finished(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.UTC().Format(time.RFC3339)
}

// printDiff shows the set churn between two runs and how balance and the
// effects moved.
func printDiff(w io.Writer, a, b warehouse.RunRecord, d warehouse.RunDiff) {
	fmt.Fprintf(w, "from %s (%s)\n  to %s (%s)\n\n", a.RunID, a.Status, b.RunID, b.Status)
	fmt.Fprintf(w, "matched sets  kept %d · changed %d · new %d · dropped %d\n", d.Kept, d.Changed, d.New, d.Dropped)
	sa, errA := decodeSummary(a)
	sb, errB := decodeSummary(b)
	if errA != nil || errB != nil {
		return
	}
	fmt.Fprintln(w, "\nbalance drift (largest |SMD| per adjustment)")
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "  adjustment\tbefore\tafter\tchange")
	worst := func(s *study.Summary) map[string]float64 {
		m := map[string]float64{}
		for _, ab := range s.Balance {
			m[ab.Adjustment] = math.Abs(float64(ab.WorstSMD))
		}
		return m
	}
	wa, wb := worst(sa), worst(sb)
	for _, ab := range sb.Balance {
		x, ok := wa[ab.Adjustment]
		if !ok {
			continue
		}
		fmt.Fprintf(tw, "  %s\t%.3f\t%.3f\t%+.3f\n", ab.Adjustment, x, wb[ab.Adjustment], wb[ab.Adjustment]-x)
	}
	tw.Flush()
	fmt.Fprintln(w, "\neffect drift (differences)")
	tw = tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "  outcome\tadjustment\tbefore\tafter\tchange")
	prev := map[string]float64{}
	for _, e := range sa.Effects {
		if e.Contrast == "difference" {
			prev[e.Outcome+"\x00"+e.Adjustment] = float64(e.Estimate)
		}
	}
	for _, e := range sb.Effects {
		x, ok := prev[e.Outcome+"\x00"+e.Adjustment]
		if e.Contrast != "difference" || !ok {
			continue
		}
		fmt.Fprintf(tw, "  %s\t%s\t%+.4g\t%+.4g\t%+.4g\n", e.Outcome, e.Adjustment, x, float64(e.Estimate), float64(e.Estimate)-x)
	}
	tw.Flush()
}
