package main

import (
	"context"
	"fmt"
	"io"
	"sort"

	"counterpart/match/demo"
	"counterpart/match/effect"
	"counterpart/match/study"
)

// runDemo writes the synthetic warehouse, runs its study and sets the
// estimates beside the planted truth.
func runDemo(ctx context.Context, dir string, units int, seed uint64, stdout, stderr io.Writer) int {
	path, data, err := demo.Write(ctx, dir, units, seed)
	if err != nil {
		fmt.Fprintln(stderr, "counterpart: "+oneLine(err.Error()))
		return exitRuntime
	}
	fmt.Fprintf(stdout, "wrote %s and its warehouse (%d synthetic members)\n\n", path, units)
	spec, err := study.Load(path)
	if err != nil {
		fmt.Fprintln(stderr, "counterpart: "+oneLine(err.Error()))
		return exitCode(err)
	}
	wh, err := study.Open(ctx, spec, false)
	if err != nil {
		fmt.Fprintln(stderr, "counterpart: "+oneLine(err.Error()))
		return exitCode(err)
	}
	defer wh.Close()
	sum, err := study.Run(ctx, spec, wh, study.Options{ToolVersion: version})
	if sum != nil && sum.Status != "" {
		printSummary(stdout, sum)
	}
	if err != nil {
		fmt.Fprintln(stderr, "counterpart: "+oneLine(err.Error()))
		return exitCode(err)
	}
	fmt.Fprintln(stdout)
	fmt.Fprintln(stdout, "planted truth versus estimates (effect among coached members)")
	outcomes := make([]string, 0, len(data.TrueATT))
	for o := range data.TrueATT {
		outcomes = append(outcomes, o)
	}
	sort.Strings(outcomes)
	for _, o := range outcomes {
		truth := data.TrueATT[o]
		fmt.Fprintf(stdout, "  %-12s planted %+.4g\n", o, truth)
		for _, e := range sum.Effects {
			if e.Outcome != o || e.Contrast != "difference" || (e.Adjustment != "unadjusted" && e.Adjustment != sum.Primary) {
				continue
			}
			lo, hi := float64(e.CILow), float64(e.CIHigh)
			verdict := "misses the planted effect"
			if lo <= truth && truth <= hi {
				verdict = "covers the planted effect"
			}
			label := "naive difference"
			if e.Adjustment != "unadjusted" {
				label = e.Adjustment + " estimate"
			}
			fmt.Fprintf(stdout, "  %-12s %-17s %+.4g  [%+.4g, %+.4g]  %s (bias %+.3g)\n", "", label, float64(e.Estimate), lo, hi, verdict, float64(e.Estimate)-truth)
		}
	}
	for _, tr := range data.TrueEvents {
		what := contrastWords(tr.Contrast)
		if tr.Horizon > 0 {
			what += fmt.Sprintf(" at day %g", tr.Horizon)
		}
		format := "%+.4g"
		if tr.Contrast == effect.ContrastRateRatio {
			format = "%.4g"
		}
		fmt.Fprintf(stdout, "  %-12s planted %s "+format+"\n", tr.Outcome, what, tr.Value)
		for _, e := range sum.Effects {
			if e.Outcome != tr.Outcome || e.Contrast != tr.Contrast || (e.Adjustment != "unadjusted" && e.Adjustment != sum.Primary) {
				continue
			}
			if tr.Horizon > 0 && (e.Horizon == nil || float64(*e.Horizon) != tr.Horizon) {
				continue
			}
			lo, hi := float64(e.CILow), float64(e.CIHigh)
			verdict := "misses the planted effect"
			if lo <= tr.Value && tr.Value <= hi {
				verdict = "covers the planted effect"
			}
			label := "naive comparison"
			if e.Adjustment != "unadjusted" {
				label = e.Adjustment + " estimate"
			}
			fmt.Fprintf(stdout, "  %-12s %-17s "+format+"  ["+format+", "+format+"]  %s\n", "", label, float64(e.Estimate), lo, hi, verdict)
		}
	}
	fmt.Fprintf(stdout, "\nresults are in %s (tables and views prefixed %s)\n", spec.Warehouse.DSN, spec.Output.Prefix)
	return exitOK
}

// contrastWords names a contrast for the demo's truth lines.
func contrastWords(c string) string {
	switch c {
	case effect.ContrastSurvivalDifference:
		return "survival difference"
	case effect.ContrastRateRatio:
		return "rate ratio"
	}
	return c
}
