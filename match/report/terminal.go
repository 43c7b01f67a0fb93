package report

import (
	"fmt"
	"io"
	"math"
	"strings"

	"counterpart/match/effect"
	"counterpart/match/study"
)

// TerminalOptions tune the terminal summary.
type TerminalOptions struct {
	// Color adds ANSI colour; only for a terminal, never for logs.
	Color bool
}

// Caution is printed under every summary and report: the estimates are
// only as good as their assumptions.
const Caution = "Observational estimates rest on no unmeasured confounding and adequate overlap; " +
	"they support, not replace, clinical and policy judgement. Follow your organisation's data-governance and privacy rules."

// Terminal writes the compact human summary of a run. It prints counts and
// aggregates only, never a unit's row.
func Terminal(w io.Writer, s *study.Summary, o TerminalOptions) {
	p := printer{w: w, color: o.Color}
	// The run's wall time when it was published (the stages are disjoint
	// and leave out the lock and the COMMIT); else the stages' sum.
	total := 0.0
	for _, v := range s.Timings {
		total += v
	}
	if !s.StartedAt.IsZero() && s.FinishedAt.After(s.StartedAt) {
		total = s.FinishedAt.Sub(s.StartedAt).Seconds()
	}
	status := s.Status
	switch status {
	case "succeeded", "dry-run":
		status = p.green(status)
	case "rejected", "failed":
		status = p.red(status)
	}
	p.line("%s  run %s  on %s  %s  %.1fs", p.bold(s.Study), s.RunID, s.Engine, status, total)
	p.line("")
	c := s.Counts
	p.row("cohort", "%s units: %s treated, %s comparison", thousands(c.Units), thousands(c.Treated), thousands(c.Control))
	for _, pl := range s.Pooled {
		p.row("", "%s: %s levels with fewer than %s units pooled into %s (%s units)",
			pl.Covariate, thousands(pl.Levels), thousands(pl.MinUnits), pl.Level, thousands(pl.Units))
	}
	sup := s.Support
	if sup.Rule == "none" {
		p.row("support", "none applied")
	} else {
		p.row("support", "%s keeps ps in [%.3f, %.3f]; %s units outside", sup.Rule, float64(sup.Low), float64(sup.High), thousands(sup.Dropped))
	}
	m := s.Model
	p.row("score", "%s, %d terms, %d IRLS steps, c-statistic %.3f", m.Kind, len(m.Terms), m.Iterations, float64(m.CStatistic))
	if mt := s.Matching; mt != nil {
		cal := "no caliper"
		if mt.CaliperSD > 0 {
			cal = fmt.Sprintf("caliper %.2g SD = %.3f on logit(ps)", float64(mt.CaliperSD), float64(mt.CaliperWidth))
		}
		reuse := "without reuse"
		if mt.Reuse {
			reuse = "with reuse"
		}
		p.row("matching", "%s 1:%d %s, %s, %d exact strata", mt.Algorithm, mt.Controls, reuse, cal, mt.Strata)
		p.row("", "%s of %s treated matched to %s comparison units (%s unmatched)",
			thousands(mt.MatchedTreated), thousands(c.SupportTreated), thousands(mt.MatchedControls), thousands(mt.UnmatchedTreated))
		if sv := mt.Solver; sv != nil {
			cert := "certified optimal against every eligible pair"
			if !sv.Certified {
				cert = p.red("NOT certified")
			}
			line := fmt.Sprintf("total distance %.4g, %s (%d rounds, %.2fs)", float64(sv.Objective), cert, sv.Rounds, float64(sv.Seconds))
			if sv.GreedyTotal > 0 {
				line += fmt.Sprintf("; greedy on the same units: %.4g", float64(sv.GreedyTotal))
			}
			p.row("", "%s", line)
		}
		if ch := mt.Churn; ch != nil {
			p.row("", "kept %s of %s sets from run %s, released %s, formed %s new",
				thousands(ch.Kept), thousands(ch.PriorSets), ch.PriorRun, thousands(ch.Released), thousands(ch.New))
		}
	}
	p.line("")
	vr := float64(s.Gate.VRLimit)
	p.line("%s", p.bold("balance")+fmt.Sprintf("  limits: |SMD| < %g, variance ratio within %.3g..%g", float64(s.Gate.SMDLimit), 1/vr, vr))
	p.line("  %-12s %-6s %-10s %-24s %s", "adjustment", "", "max |SMD|", "at", "effective n (treated / comparison)")
	for _, b := range s.Balance {
		mark := p.green("pass")
		if !b.Pass {
			mark = p.red("FAIL")
		}
		head := " "
		if b.Adjustment == s.Primary {
			head = "*"
		}
		p.line(" %s%-12s %-6s %-10.3f %-24s %s / %s", head, b.Adjustment, mark, math.Abs(float64(b.WorstSMD)), b.WorstVariable,
			thousands(int(math.Round(float64(b.ESSTreated)))), thousands(int(math.Round(float64(b.ESSControl)))))
	}
	p.line("")
	p.line("%s", p.bold("effects")+"  treated minus comparison (risk ratio for events), 95% interval")
	p.line("  %-13s %-9s %-32s %-22s %7s %6s", "adjustment", "estimand", "difference", "risk ratio", "E-value", "Γ")
	var outcomes []string
	byKey := map[[3]string]study.EffectRow{}
	for _, e := range s.Effects {
		if len(outcomes) == 0 || outcomes[len(outcomes)-1] != e.Outcome {
			outcomes = append(outcomes, e.Outcome)
		}
		if e.Horizon == nil {
			byKey[[3]string{e.Outcome, e.Adjustment, e.Contrast}] = e
		}
	}
	for _, o := range outcomes {
		var adjs []string
		for _, e := range s.Effects {
			if e.Outcome == o && e.Contrast == "difference" {
				adjs = append(adjs, e.Adjustment)
			}
		}
		if len(adjs) == 0 {
			continue // a time-to-event or rate outcome: its own section below
		}
		p.line(" %s", o)
		for _, a := range adjs {
			d := byKey[[3]string{o, a, "difference"}]
			head := " "
			if a == s.Primary {
				head = "*"
			}
			ratio, ev := "", d.EValue
			if rr, ok := byKey[[3]string{o, a, "risk_ratio"}]; ok {
				ratio = fmt.Sprintf("%.3f [%.3f, %.3f]", float64(rr.Estimate), float64(rr.CILow), float64(rr.CIHigh))
				ev = rr.EValue
			}
			p.line(" %s%-13s %-9s %-32s %-22s %7s %6s", head, a, d.Estimand,
				fmt.Sprintf("%s [%s, %s]", signed(float64(d.Estimate)), signed(float64(d.CILow)), signed(float64(d.CIHigh))),
				ratio, optional(float64(ev), "%.2f"), optional(float64(d.RosenbaumGamma), "%.2f"))
		}
	}
	terminalEvents(p, s, outcomes)
	p.line("  * headline adjustment (%s); the balance gate judges it. E-value: confounder strength (risk-ratio", s.Primary)
	p.line("    scale) that would explain the estimate away. Γ: matched-pair odds of hidden bias at which p > 0.05.")
	if s.Message != "" {
		p.line("")
		p.line("%s", p.red("note: ")+s.Message)
	}
	p.line("")
	p.line("%s", wrap(Caution, 78))
}

type printer struct {
	w     io.Writer
	color bool
}

func (p printer) line(format string, args ...any) { fmt.Fprintf(p.w, format+"\n", args...) }

func (p printer) row(label, format string, args ...any) {
	fmt.Fprintf(p.w, "  %-10s %s\n", label, fmt.Sprintf(format, args...))
}

func (p printer) wrapANSI(code, s string) string {
	if !p.color {
		return s
	}
	return "\x1b[" + code + "m" + s + "\x1b[0m"
}

func (p printer) green(s string) string { return p.wrapANSI("32", s) }
func (p printer) red(s string) string   { return p.wrapANSI("31", s) }
func (p printer) bold(s string) string  { return p.wrapANSI("1", s) }

// thousands formats an integer with thin separators for reading at a glance.
func thousands(n int) string {
	s := fmt.Sprint(n)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var b strings.Builder
	for i, r := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(r)
	}
	if neg {
		return "-" + b.String()
	}
	return b.String()
}

// signed prints a number with its sign and four significant digits.
func signed(x float64) string {
	if math.IsNaN(x) {
		return "n/a"
	}
	return fmt.Sprintf("%+.4g", x)
}

// optional formats a value, or leaves the cell blank when it is undefined.
func optional(x float64, format string) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return ""
	}
	return fmt.Sprintf(format, x)
}

func wrap(s string, width int) string {
	var out, line strings.Builder
	for _, word := range strings.Fields(s) {
		if line.Len() > 0 && line.Len()+1+len(word) > width {
			out.WriteString(line.String() + "\n")
			line.Reset()
		}
		if line.Len() > 0 {
			line.WriteByte(' ')
		}
		line.WriteString(word)
	}
	out.WriteString(line.String())
	return out.String()
}

// terminalEvents prints the time-to-event and rate outcomes: per
// adjustment the hazard ratio (with the proportional-hazards check) and,
// at each horizon, the survival and RMST differences; or the rate ratio
// and the rate difference per 1,000 exposure units.
func terminalEvents(p printer, s *study.Summary, outcomes []string) {
	interval := func(e study.EffectRow, format string) string {
		return fmt.Sprintf(format+" ["+format+", "+format+"]", float64(e.Estimate), float64(e.CILow), float64(e.CIHigh))
	}
	for _, o := range outcomes {
		var rows []study.EffectRow
		for _, e := range s.Effects {
			if e.Outcome == o {
				rows = append(rows, e)
			}
		}
		if len(rows) == 0 || rows[0].Contrast == "difference" {
			continue
		}
		p.line(" %s", o)
		for _, e := range rows {
			head := " "
			if e.Adjustment == s.Primary {
				head = "*"
			}
			switch e.Contrast {
			case effect.ContrastHazardRatio:
				ph := ""
				if e.PH != nil {
					ph = "PH check p " + optional(float64(e.PH.P), "%.2f")
				}
				p.line(" %s%-13s %-9s hazard ratio %-24s %7s  %s", head, e.Adjustment, e.Estimand, interval(e, "%.3f"), optional(float64(e.EValue), "%.2f"), ph)
			case effect.ContrastSurvivalDifference:
				rmst := ""
				for _, r := range rows {
					if r.Adjustment == e.Adjustment && r.Contrast == effect.ContrastRMSTDifference && r.Horizon != nil && *r.Horizon == *e.Horizon {
						rmst = "restricted mean " + fmt.Sprintf("%s [%s, %s]", signed(float64(r.Estimate)), signed(float64(r.CILow)), signed(float64(r.CIHigh)))
					}
				}
				p.line("   %-22s at %-7g survival %s  %s", "", float64(*e.Horizon),
					fmt.Sprintf("%s [%s, %s]", signed(float64(e.Estimate)), signed(float64(e.CILow)), signed(float64(e.CIHigh))), rmst)
			case effect.ContrastRateRatio:
				p.line(" %s%-13s %-9s rate ratio   %-24s %7s", head, e.Adjustment, e.Estimand, interval(e, "%.3f"), optional(float64(e.EValue), "%.2f"))
			case effect.ContrastRateDifference:
				p.line("   %-22s per %s exposure units %s [%s, %s]", "", thousands(effect.RatePer),
					signed(float64(e.Estimate)), signed(float64(e.CILow)), signed(float64(e.CIHigh)))
			}
		}
	}
}
