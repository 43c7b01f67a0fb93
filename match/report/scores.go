package report

import (
	"fmt"
	"math"
	"strings"

	"counterpart/match/study"
)

// scores draws each adjustment's score densities as mirrored histograms:
// treated above the axis, comparison below.
func (p *page) scores() {
	s := p.s
	p.f("<section aria-labelledby=\"h-scores\">\n<h2 id=\"h-scores\">Propensity score overlap</h2>\n")
	d := s.Diagnostics
	if d == nil || len(d.Scores) == 0 {
		p.f("<p class=\"note\">Score distributions were not computed for this run.</p>\n</section>\n")
		return
	}
	const w, cols, panelH, gap = 900, 2, 190, 26
	panelW := (w - 40 - gap*(cols-1)) / cols
	nrows := (len(d.Scores) + cols - 1) / cols
	h := 40 + nrows*(panelH+gap)
	names := make([]string, len(d.Scores))
	for k, sc := range d.Scores {
		names[k] = sc.Adjustment
	}
	p.f("<figure>\n")
	p.svgOpen("fig-scores", w, h, "Propensity score distributions by arm before and after adjustment",
		fmt.Sprintf("Mirrored histograms of the propensity score, %d bins on 0 to 1, treated above and comparison below the axis, one panel each for %s.",
			d.ScoreBins, strings.Join(names, ", ")))
	p.armLegend(20, 20, false)
	for k, sc := range d.Scores {
		x0 := 20 + float64((k%cols)*(panelW+gap))
		y0 := 40 + float64((k/cols)*(panelH+gap))
		p.scorePanel(sc, d.ScoreBins, x0, y0, float64(panelW), panelH)
	}
	p.f("</svg>\n<figcaption>Each arm's bars are a density (they integrate to 1), so arms of different sizes compare. ")
	if s.Support.Rule != "none" && s.Support.Rule != "" {
		p.f("Dashed lines mark the common-support bounds [%s, %s]. ", fixed(s.Support.Low, 3), fixed(s.Support.High, 3))
	}
	p.f("Good overlap shows as mirror images; treated bars with no comparison bars beneath them mark units nobody resembles.</figcaption>\n</figure>\n</section>\n")
}

func (p *page) scorePanel(sc study.ScoreDensity, bins int, x0, y0, w, h float64) {
	s := p.s
	p.f("<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"none\" stroke=\"#bbb\"/>\n", x0, y0, w, h)
	p.text(x0+8, y0+16, "start", "head", sc.Adjustment)
	left, bottom := x0+34, y0+h-22
	pw := w - 44
	mid := y0 + 24 + (bottom-y0-24)/2
	half := (bottom - y0 - 24) / 2
	maxD := 0.0
	for b := range bins {
		for _, v := range []study.Num{at(sc.Treated, b), at(sc.Control, b)} {
			if finite(v) {
				maxD = math.Max(maxD, float64(v))
			}
		}
	}
	if maxD == 0 {
		maxD = 1
	}
	bw := pw / float64(bins)
	for b := range bins {
		if v := at(sc.Treated, b); finite(v) && v > 0 {
			bh := half * float64(v) / maxD
			p.f("<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"%s\"/>\n", left+float64(b)*bw, mid-bh, math.Max(bw-0.6, 0.5), bh, colTreated)
		}
		if v := at(sc.Control, b); finite(v) && v > 0 {
			bh := half * float64(v) / maxD
			p.f("<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"%s\"/>\n", left+float64(b)*bw, mid, math.Max(bw-0.6, 0.5), bh, colComparison)
		}
	}
	p.line(left, mid, left+pw, mid, colInk, 1, "")
	p.text(left-4, mid-half+10, "end", "small", "T")
	p.text(left-4, mid+half-2, "end", "small", "C")
	for _, t := range []float64{0, 0.25, 0.5, 0.75, 1} {
		x := left + pw*t
		p.line(x, bottom, x, bottom+4, colInk, 1, "")
		p.text(x, bottom+16, "middle", "small", trimFloat(t))
	}
	if s.Support.Rule != "none" && s.Support.Rule != "" {
		for _, b := range []study.Num{s.Support.Low, s.Support.High} {
			if finite(b) {
				x := left + pw*float64(b)
				p.line(x, y0+22, x, bottom, colMuted, 1, "4 3")
			}
		}
	}
	p.text(left+pw, y0+16, "end", "small", "propensity score")
}

func at(xs []study.Num, k int) study.Num {
	if k < len(xs) {
		return xs[k]
	}
	return study.Num(math.NaN())
}
