package report

import (
	"fmt"
	"strings"
)

// flow draws cohort → in support → matched as boxes with bars whose
// length is the share of the cohort that remains.
func (p *page) flow() {
	s, c := p.s, p.s.Counts
	type stage struct {
		title        string
		treated, ctl int
		note         string
	}
	stages := []stage{{"Cohort read", c.Treated, c.Control, "as returned by the cohort SQL"}}
	supportNote := "no support rule applied"
	if s.Support.Rule != "none" && s.Support.Rule != "" {
		supportNote = fmt.Sprintf("%s rule keeps ps in [%s, %s]; %s outside", s.Support.Rule, fixed(s.Support.Low, 3), fixed(s.Support.High, 3), thousands(s.Support.Dropped))
	}
	stages = append(stages, stage{"Inside common support", c.SupportTreated, c.SupportControl, supportNote})
	if m := s.Matching; m != nil {
		stages = append(stages, stage{"Matched", c.MatchedTreated, c.MatchedControl,
			fmt.Sprintf("%s 1:%d; %s treated unmatched", m.Algorithm, m.Controls, thousands(m.UnmatchedTreated))})
	}
	const w, h = 900, 205
	desc := make([]string, len(stages))
	for k, st := range stages {
		desc[k] = fmt.Sprintf("%s: %d units, %d treated and %d comparison", st.title, st.treated+st.ctl, st.treated, st.ctl)
	}
	p.f("<section aria-labelledby=\"h-flow\">\n<h2 id=\"h-flow\">Who was compared</h2>\n<figure>\n")
	p.svgOpen("fig-flow", w, h, "Flow of units from the cohort to the comparison", strings.Join(desc, "; ")+".")
	boxW := (float64(w) - 40 - 50*float64(len(stages)-1)) / float64(len(stages))
	for k, st := range stages {
		x := 20 + float64(k)*(boxW+50)
		p.f("<rect x=\"%.1f\" y=\"20\" width=\"%.1f\" height=\"170\" rx=\"6\" fill=\"#f6f6f6\" stroke=\"#999\"/>\n", x, boxW)
		p.text(x+12, 44, "start", "head", st.title)
		p.text(x+12, 68, "start", "", thousands(st.treated+st.ctl)+" units")
		// Bars: length = share of the cohort's arm that remains.
		bar := boxW - 24
		for a, arm := range []struct {
			n      int
			of     int
			colour string
			label  string
		}{{st.treated, c.Treated, colTreated, "treated"}, {st.ctl, c.Control, colComparison, "comparison"}} {
			y := 80 + float64(a)*30
			frac := 0.0
			if arm.of > 0 {
				frac = float64(arm.n) / float64(arm.of)
			}
			p.f("<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"10\" fill=\"#ffffff\" stroke=\"#bbb\"/>\n", x+12, y, bar)
			p.f("<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"10\" fill=\"%s\"/>\n", x+12, y, bar*frac, arm.colour)
			p.text(x+12, y+23, "start", "small", fmt.Sprintf("%s %s (%.0f%% of cohort's)", thousands(arm.n), arm.label, 100*frac))
		}
		for j, ln := range wrapLines(st.note, int(boxW/6), 2) {
			p.text(x+12, 160+float64(j)*14, "start", "small", ln)
		}
		if k > 0 {
			ax := x - 50
			p.line(ax+6, 95, ax+38, 95, colInk, 2, "")
			p.f("<polygon points=\"%.1f,89 %.1f,95 %.1f,101\" fill=\"%s\"/>\n", ax+36, ax+46, ax+36, colInk)
		}
	}
	p.f("</svg>\n<figcaption>Bars show the share of each arm of the cohort that remains at each step. ")
	p.f("Weighting adjustments use every unit inside common support; their effective sample sizes are in the balance table.</figcaption>\n</figure>\n</section>\n")
}
