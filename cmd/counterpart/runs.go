package main

import (
	"context"
	"fmt"
	"io"
	"strings"

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
			*code = fail(stderr, c.String("log-format"), fmt.Errorf("%w: %s needs --study STUDY.yaml", warehouse.ErrBadInput, strings.TrimPrefix(c.Command.HelpName, c.App.Name+" ")))
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
				if c.NArg() > 0 {
					return usageError(fmt.Sprintf("runs takes no argument (got %q): counterpart runs --study S, or runs show / runs diff", c.Args().First()))
				}
				return withStudy(c, func(spec *study.Spec, wh warehouse.Warehouse) error {
					// The engine names the step (list runs); wrapping again would say it twice.
					recs, err := wh.Runs(ctx, spec.OutputTarget(), c.Int("limit"))
					if err != nil {
						return err
					}
					report.RunList(stdout, recs)
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
						if c.NArg() > 1 {
							return usageError("runs show takes at most one run: counterpart runs show --study S [RUN|latest]")
						}
						return withStudy(c, func(spec *study.Spec, wh warehouse.Warehouse) error {
							rec, err := resolve(ctx, wh, spec.OutputTarget(), c.Args().First())
							if err != nil {
								return fmt.Errorf("show run: %w", err)
							}
							sum, _ := study.DecodeSummary(rec) // a run without one still shows its lineage
							report.RunDetail(stdout, rec, sum, report.TerminalOptions{Color: isTTY(stdout)})
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
							// The engine names the step (diff runs A and B).
							d, err := wh.DiffRuns(ctx, out, a.RunID, b.RunID)
							if err != nil {
								return err
							}
							// Drift needs both summaries; without them the set churn is all there is.
							sa, _ := study.DecodeSummary(a)
							sb, _ := study.DecodeSummary(b)
							report.RunDiff(stdout, a, b, d, sa, sb)
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
				if c.NArg() > 1 {
					return usageError("report takes at most one run: counterpart report --study S [RUN|latest] [--out FILE]")
				}
				return withStudy(c, func(spec *study.Spec, wh warehouse.Warehouse) error {
					rec, err := resolve(ctx, wh, spec.OutputTarget(), c.Args().First())
					if err != nil {
						return fmt.Errorf("report: %w", err)
					}
					sum, err := study.DecodeSummary(rec)
					if err != nil {
						return fmt.Errorf("report: %w", err)
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
