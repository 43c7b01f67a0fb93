package report

import (
	"fmt"
	"math"
	"strings"

	"counterpart/match/effect"
	"counterpart/match/study"
)

// survival draws, for each time-to-event outcome, each adjustment's
// weighted Kaplan–Meier curves of both arms with their 95% bands and the
// numbers at risk beneath, and lists the proportional-hazards checks. The
// curves come from the summary's grid, never from individual event times.
func (p *page) survival() {
	s := p.s
	if len(s.Survival) == 0 {
		return
	}
	p.f("<section aria-labelledby=\"h-survival\">\n<h2 id=\"h-survival\">Time to event</h2>\n")
	p.f("<p>Survival (the share still free of the event) in each arm over follow-up, weighted as each adjustment weights the units. " +
		"Shaded bands are pointwise 95%% intervals; the rows under each panel count the units still at risk (unweighted).</p>\n")
	var outcomes []string
	for _, c := range s.Survival {
		if len(outcomes) == 0 || outcomes[len(outcomes)-1] != c.Outcome {
			outcomes = append(outcomes, c.Outcome)
		}
	}
	for _, o := range outcomes {
		var panels [][2]study.SurvivalCurve // treated, comparison per adjustment
		for _, c := range s.Survival {
			if c.Outcome != o {
				continue
			}
			if c.Treated {
				panels = append(panels, [2]study.SurvivalCurve{c})
			} else if len(panels) > 0 {
				panels[len(panels)-1][1] = c
			}
		}
		const w, cols, panelH, gap = 900, 2, 230, 26
		panelW := (w - 40 - gap*(cols-1)) / cols
		nrows := (len(panels) + cols - 1) / cols
		h := 40 + nrows*(panelH+gap)
		var names []string
		for _, pn := range panels {
			names = append(names, pn[0].Adjustment)
		}
		id := "fig-survival-" + o
		p.f("<figure>\n")
		p.svgOpen(id, w, h, "Survival curves of "+o+" by arm under each adjustment",
			fmt.Sprintf("Weighted Kaplan–Meier curves of %s, treated and comparison, with 95%% bands and numbers at risk, one panel each for %s.", o, strings.Join(names, ", ")))
		p.armLegend(20, 20, true)
		for k, pn := range panels {
			x0 := 20 + float64((k%cols)*(panelW+gap))
			y0 := 40 + float64((k/cols)*(panelH+gap))
			p.survivalPanel(pn, x0, y0, float64(panelW), panelH)
		}
		p.f("</svg>\n<figcaption>%s: curves that stay apart after adjustment suggest an effect; curves that cross suggest the hazard ratio is not constant over follow-up (see the check below).</figcaption>\n</figure>\n", esc(o))
	}
	p.f("<div class=\"wide\"><table>\n<tr><th>outcome</th><th>adjustment</th><th class=\"n\">hazard ratio</th><th class=\"n\">PH check χ² (1 df)</th><th class=\"n\">p</th><th>transform</th></tr>\n")
	for _, e := range s.Effects {
		if e.Contrast != effect.ContrastHazardRatio || e.PH == nil {
			continue
		}
		p.f("<tr><td>%s</td><td>%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td><td>%s</td></tr>\n",
			esc(e.Outcome), esc(e.Adjustment), num(e.Estimate, 4), num(e.PH.ChiSq, 3), pValue(e.PH.P), esc(e.PH.Transform))
	}
	p.f("</table></div>\n<p class=\"note\">The check tests a trend of the treatment coefficient over follow-up with scaled Schoenfeld residuals. " +
		"It is reported, not gating: a small p means the hazard ratio summarises a changing effect, and the horizon differences are the safer reading.</p>\n</section>\n")
}

// survivalPanel draws one adjustment's pair of curves.
func (p *page) survivalPanel(pn [2]study.SurvivalCurve, x0, y0, w, h float64) {
	p.f("<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"none\" stroke=\"#bbb\"/>\n", x0, y0, w, h)
	p.text(x0+8, y0+16, "start", "head", pn[0].Adjustment)
	left, top := x0+80, y0+26
	pw, ph := w-96, h-26-62
	last := 1.0
	if t := pn[0].Time; len(t) > 0 && float64(t[len(t)-1]) > 0 {
		last = float64(t[len(t)-1])
	}
	xs := func(t float64) float64 { return left + pw*t/last }
	ys := func(v float64) float64 { return top + ph*(1-v) }
	for _, v := range []float64{0, 0.25, 0.5, 0.75, 1} {
		p.line(left, ys(v), left+pw, ys(v), colGrid, 1, "")
		p.text(left-4, ys(v)+4, "end", "small", trimFloat(v))
	}
	for k, c := range pn {
		colour, dash := colTreated, ""
		if k == 1 {
			colour, dash = colComparison, "6 3"
		}
		var band, curve strings.Builder
		for i := range c.Time {
			fmt.Fprintf(&band, "%.1f,%.1f ", xs(float64(c.Time[i])), ys(finiteOr(c.High[i], 1)))
		}
		for i := len(c.Time) - 1; i >= 0; i-- {
			fmt.Fprintf(&band, "%.1f,%.1f ", xs(float64(c.Time[i])), ys(finiteOr(c.Low[i], 0)))
		}
		for i := range c.Time {
			cmd := "L"
			if i == 0 {
				cmd = "M"
			} else {
				// A step: hold the previous level until this time.
				fmt.Fprintf(&curve, "L%.1f,%.1f ", xs(float64(c.Time[i])), ys(finiteOr(c.Survival[i-1], 1)))
			}
			fmt.Fprintf(&curve, "%s%.1f,%.1f ", cmd, xs(float64(c.Time[i])), ys(finiteOr(c.Survival[i], 1)))
		}
		p.f("<polygon points=\"%s\" fill=\"%s\" fill-opacity=\"0.15\" stroke=\"none\"/>\n", strings.TrimSpace(band.String()), colour)
		p.f("<path d=\"%s\" fill=\"none\" stroke=\"%s\" stroke-width=\"2\" stroke-dasharray=\"%s\"/>\n", strings.TrimSpace(curve.String()), colour, dash)
	}
	base := top + ph
	for k, c := range pn {
		label := "treated"
		if k == 1 {
			label = "comparison"
		}
		ry := base + 30 + float64(k)*14
		p.text(x0+6, ry, "start", "small", label)
		for i, t := range c.TickTime {
			if i < len(c.AtRisk) {
				p.text(xs(float64(t)), ry, "middle", "small", thousands(c.AtRisk[i]))
			}
		}
	}
	for _, t := range pn[0].TickTime {
		x := xs(float64(t))
		p.line(x, base, x, base+4, colInk, 1, "")
		p.text(x, base+15, "middle", "small", trimFloat(float64(t)))
	}
}

func finiteOr(v study.Num, def float64) float64 {
	if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
		return def
	}
	return float64(v)
}
