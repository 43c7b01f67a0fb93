package report

import (
	"fmt"
	"slices"
	"strings"

	"counterpart/match/study"
)

// ecdf draws, for the covariates that started worst, each arm's weighted
// eCDF under each adjustment, and tabulates the eCDF distances.
func (p *page) ecdf() {
	s := p.s
	p.f("<section aria-labelledby=\"h-ecdf\">\n<h2 id=\"h-ecdf\">Whole-distribution checks</h2>\n")
	d := s.Diagnostics
	if d == nil {
		p.f("<p class=\"note\">eCDF diagnostics were not computed for this run.</p>\n</section>\n")
		return
	}
	p.f("<p>Means can agree while distributions do not. These panels compare the cumulative distributions of the arms for the continuous covariates that were most imbalanced before adjustment.</p>\n")
	if len(d.Curves) > 0 {
		cols := len(d.Curves[0].Adjustments)
		const w, rowH, labelH = 900, 170, 22
		pw := (float64(w) - 30) / float64(max(cols, 1))
		h := 40 + len(d.Curves)*(rowH+labelH+12)
		var covs []string
		for _, c := range d.Curves {
			covs = append(covs, c.Covariate)
		}
		p.f("<figure>\n")
		p.svgOpen("fig-ecdf", w, h, "Empirical cumulative distributions of the worst covariates by arm",
			fmt.Sprintf("Step curves of the weighted eCDF of treated (solid) and comparison (dashed) units for %s, one panel per adjustment, evaluated at pooled quantiles.",
				strings.Join(covs, ", ")))
		p.armLegend(20, 20, true)
		for r, c := range d.Curves {
			y0 := 40 + float64(r*(rowH+labelH+12))
			p.text(20, y0+15, "start", "head", fmt.Sprintf("%s (unadjusted SMD %s)", c.Covariate, fixed(c.UnadjustedSMD, 2)))
			for k, pan := range c.Adjustments {
				x0 := 20 + float64(k)*pw
				p.ecdfPanel(c, pan, x0, y0+labelH, pw-10, rowH)
			}
		}
		p.f("</svg>\n<figcaption>Curves are evaluated at the 1st to 99th percentiles of the pooled cohort (at least ten units per step); " +
			"the extremes are not drawn, so no individual value is shown. The max gap over each panel is the largest vertical distance over all values (the Kolmogorov–Smirnov distance).</figcaption>\n</figure>\n")
	}
	if len(d.Distances) > 0 {
		p.distanceTable(d)
	}
	p.f("</section>\n")
}

func (p *page) distance(d *study.Diagnostics, cov, adj string) (study.ECDFDistance, bool) {
	for _, r := range d.Distances {
		lab := r.Covariate
		if r.Level != "" {
			lab += "=" + r.Level
		}
		if lab == cov && r.Adjustment == adj {
			return r, true
		}
	}
	return study.ECDFDistance{}, false
}

func (p *page) ecdfPanel(c study.ECDFCurve, pan study.ECDFPanel, x0, y0, w, h float64) {
	left, top := x0+30, y0+18
	pw, ph := w-36, h-44
	title := pan.Adjustment
	if r, ok := p.distance(p.s.Diagnostics, c.Covariate, pan.Adjustment); ok {
		title += " · max gap " + fixed(r.Max, 3)
	}
	p.text(x0+30, y0+10, "start", "small", title)
	p.f("<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"none\" stroke=\"#bbb\"/>\n", left, top, pw, ph)
	if len(c.Grid) == 0 {
		p.text(left+pw/2, top+ph/2, "middle", "small", "too few units to draw")
		return
	}
	lo, hi := float64(c.Grid[0]), float64(c.Grid[len(c.Grid)-1])
	if hi == lo {
		hi = lo + 1
	}
	xs := func(v float64) float64 { return left + 4 + (pw-8)*(v-lo)/(hi-lo) }
	ys := func(f float64) float64 { return top + ph - ph*f }
	for _, f := range []float64{0, 0.5, 1} {
		p.line(left, ys(f), left+pw, ys(f), colGrid, 1, "")
		p.text(left-3, ys(f)+4, "end", "small", trimFloat(f))
	}
	step := func(vals []study.Num, colour, dash string) {
		var sb strings.Builder
		started := false
		prevY := 0.0
		for j, g := range c.Grid {
			v := at(vals, j)
			if !finite(v) {
				continue
			}
			x, y := xs(float64(g)), ys(float64(v))
			if !started {
				fmt.Fprintf(&sb, "%.1f,%.1f", x, y)
				started = true
			} else {
				fmt.Fprintf(&sb, " %.1f,%.1f %.1f,%.1f", x, prevY, x, y)
			}
			prevY = y
		}
		if !started {
			return
		}
		d := ""
		if dash != "" {
			d = " stroke-dasharray=\"" + dash + "\""
		}
		p.f("<polyline points=\"%s\" fill=\"none\" stroke=\"%s\" stroke-width=\"2\"%s/>\n", sb.String(), colour, d)
	}
	step(pan.Treated, colTreated, "")
	step(pan.Control, colComparison, "6 3")
	p.text(left, top+ph+14, "start", "small", trimFloat(lo))
	p.text(left+pw, top+ph+14, "end", "small", trimFloat(hi))
}

func (p *page) distanceTable(d *study.Diagnostics) {
	var adjs []string
	for _, r := range d.Distances {
		if !slices.Contains(adjs, r.Adjustment) {
			adjs = append(adjs, r.Adjustment)
		}
	}
	p.f("<h3>eCDF distances, every covariate</h3>\n<p class=\"note\">Largest / mean absolute difference between the arms' cumulative distributions over the values the covariate takes (0 = identical, 1 = disjoint). For a 0/1 level the largest gap is the difference in proportions.</p>\n")
	p.f("<table>\n<tr><th>covariate</th>")
	for _, a := range adjs {
		p.f("<th class=\"n\">%s<br/>largest / mean</th>", esc(a))
	}
	p.f("</tr>\n")
	var last string
	for _, r := range d.Distances {
		lab := r.Covariate
		if r.Level != "" {
			lab += " = " + r.Level
		}
		if lab == last {
			continue
		}
		last = lab
		p.f("<tr><td>%s</td>", esc(lab))
		for _, a := range adjs {
			cell := "n/a"
			for _, q := range d.Distances {
				if q.Covariate == r.Covariate && q.Level == r.Level && q.Adjustment == a {
					cell = fixed(q.Max, 3) + " / " + fixed(q.Mean, 3)
				}
			}
			p.f("<td class=\"n\">%s</td>", cell)
		}
		p.f("</tr>\n")
	}
	p.f("</table>\n")
}
