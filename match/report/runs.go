package report

import (
	"fmt"
	"io"
	"math"
	"text/tabwriter"
	"time"

	"counterpart/match/study"
	"counterpart/warehouse"
)

// The runs views: a study's run history, one run's lineage, and the drift
// between two runs. They format rows the warehouse returned and summaries
// study decoded; they read nothing themselves.

// RunList writes a study's runs, one line each, in the order given
// (newest first from the warehouse).
func RunList(w io.Writer, recs []warehouse.RunRecord) {
	if len(recs) == 0 {
		fmt.Fprintln(w, "no runs yet")
		return
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "run\tstatus\tstarted (UTC)\tseconds\tunits\ttreated\tmatched\tworst |SMD|\theadline effect")
	for _, r := range recs {
		d := study.Digest(r)
		secs := ""
		if !r.FinishedAt.IsZero() {
			secs = fmt.Sprintf("%.1f", r.FinishedAt.Sub(r.StartedAt).Seconds())
		}
		worst := ""
		if !math.IsNaN(d.WorstSMD) {
			worst = fmt.Sprintf("%.3f", d.WorstSMD)
		}
		headline := ""
		if e := d.Headline; e != nil {
			headline = fmt.Sprintf("%s %+.4g [%+.4g, %+.4g]", e.Outcome, float64(e.Estimate), float64(e.CILow), float64(e.CIHigh))
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d\t%d\t%d\t%s\t%s\n", r.RunID, r.Status, r.StartedAt.UTC().Format(time.DateTime), secs,
			d.Units, d.Treated, d.MatchedTreated, worst, headline)
	}
	tw.Flush()
}

// RunDetail writes one run's lineage, then its summary as Terminal prints
// it when the run stored one (sum may be nil).
func RunDetail(w io.Writer, r warehouse.RunRecord, sum *study.Summary, o TerminalOptions) {
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
	if sum != nil {
		fmt.Fprintln(w)
		Terminal(w, sum, o)
	}
}

func finished(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.UTC().Format(time.RFC3339)
}

// RunDiff writes the set churn between runs a and b and, when both stored
// a summary (sa and sb non-nil), how balance and the effects moved.
func RunDiff(w io.Writer, a, b warehouse.RunRecord, d warehouse.RunDiff, sa, sb *study.Summary) {
	fmt.Fprintf(w, "from %s (%s)\n  to %s (%s)\n\n", a.RunID, a.Status, b.RunID, b.Status)
	fmt.Fprintf(w, "matched sets  kept %d · changed %d · new %d · dropped %d\n", d.Kept, d.Changed, d.New, d.Dropped)
	if sa == nil || sb == nil {
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
