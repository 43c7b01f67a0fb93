package report

import (
	"fmt"
	"time"
)

// The first screen: who ran what, when, with which verdict, and the
// cautions to read before any number.

// statusClass colours the status badge; the word itself carries the
// meaning, so colour only repeats it.
func statusClass(status string) string {
	switch status {
	case "succeeded", "dry-run":
		return "ok"
	case "rejected", "failed":
		return "bad"
	}
	return "neutral"
}

// header is the run record: the lineage a reader needs to trust or
// reproduce the page (run id, study file hash, cohort fingerprint).
func (p *page) header() {
	s := p.s
	status := s.Status
	if status == "" {
		status = "not recorded"
	}
	p.f("<header>\n<h1>%s</h1>\n", esc(s.Study))
	p.f("<p class=\"lede\">Comparison report for run <code>%s</code> <span class=\"badge %s\">%s</span></p>\n", esc(s.RunID), statusClass(s.Status), esc(status))
	p.f("<table class=\"record\" aria-label=\"run record\">\n")
	row := func(k, v string) { p.f("<tr><th scope=\"row\">%s</th><td>%s</td></tr>\n", esc(k), v) }
	orNot := func(v string) string {
		if v == "" {
			return "<span class=\"note\">not recorded</span>"
		}
		return "<code>" + esc(v) + "</code>"
	}
	row("study", esc(s.Study))
	row("run id", orNot(s.RunID))
	row("status", esc(status))
	row("engine", esc(s.Engine))
	row("started", esc(stamp(s.StartedAt)))
	row("finished", esc(stamp(s.FinishedAt)))
	if !s.StartedAt.IsZero() && !s.FinishedAt.IsZero() {
		row("wall time", esc(s.FinishedAt.Sub(s.StartedAt).Round(time.Millisecond).String()))
	}
	row("tool version", orNot(p.s.ToolVersion))
	row("study file SHA-256", orNot(p.s.SpecSHA256))
	row("cohort fingerprint", orNot(s.Fingerprint))
	row("headline", esc(fmt.Sprintf("%s (estimand %s)", s.Primary, s.Estimand)))
	if s.DryRun {
		row("dry run", "yes: nothing was written to the warehouse")
	}
	p.f("</table>\n</header>\n")
}

func stamp(t time.Time) string {
	if t.IsZero() {
		return "not recorded"
	}
	return t.UTC().Format("2006-01-02 15:04:05 UTC")
}

// cautions come before the charts so the limits of the design are read
// before its numbers.
func (p *page) cautions() {
	s := p.s
	p.f("<section aria-labelledby=\"h-cautions\">\n<h2 id=\"h-cautions\">Before reading the numbers</h2>\n<div class=\"cautions\"><ul>\n")
	if s.Message != "" {
		p.f("<li><strong>Run note:</strong> %s</li>\n", esc(s.Message))
	}
	if !s.Gate.Pass && s.Gate.Message != "" && s.Gate.Message != s.Message {
		p.f("<li><strong>Balance gate:</strong> %s</li>\n", esc(s.Gate.Message))
	}
	p.f("<li>%s</li>\n", esc(Caution))
	p.f("<li>Balance on measured covariates is necessary, not sufficient: it says nothing about covariates the cohort does not hold.</li>\n")
	if s.Support.Dropped > 0 {
		p.f("<li>%s units fell outside common support and are not part of any adjusted comparison; the estimates describe the units that remain.</li>\n", thousands(s.Support.Dropped))
	}
	if m := s.Matching; m != nil && m.UnmatchedTreated > 0 {
		p.f("<li>%s treated units found no comparison unit within the caliper; the matched estimate describes the matched treated units only.</li>\n", thousands(m.UnmatchedTreated))
	}
	p.f("</ul></div>\n</section>\n")
}
