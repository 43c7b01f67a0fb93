package report

import (
	"cmp"
	"fmt"
	"math"
	"slices"
	"strings"

	"counterpart/match/study"
)

// balance draws |SMD| per balance variable and adjustment, with the
// study's limit as a vertical line, and tabulates each adjustment.
func (p *page) balance() {
	s := p.s
	p.f("<section aria-labelledby=\"h-balance\">\n<h2 id=\"h-balance\">Covariate balance</h2>\n")
	if len(s.Balance) == 0 {
		p.f("<p class=\"note\">The run stopped before balance was computed.</p>\n</section>\n")
		return
	}
	limit := float64(s.Gate.SMDLimit)
	type row struct {
		label string
		unadj float64
		smd   []float64 // per adjustment, |SMD|
	}
	rows := make([]row, len(s.Balance[0].Stats))
	xmax := limit * 1.5
	for k, st := range s.Balance[0].Stats {
		lab := st.Name
		if st.Level != "" {
			lab += " = " + st.Level
		}
		rows[k] = row{label: lab, unadj: math.Abs(float64(st.SMD))}
		for _, b := range s.Balance {
			v := math.NaN()
			if k < len(b.Stats) {
				v = math.Abs(float64(b.Stats[k].SMD))
			}
			rows[k].smd = append(rows[k].smd, v)
			if !math.IsNaN(v) && !math.IsInf(v, 0) {
				xmax = math.Max(xmax, v)
			}
		}
	}
	// Worst first before adjustment: the eye starts where the problem was.
	slices.SortStableFunc(rows, func(a, b row) int { return cmp.Compare(nanLow(b.unadj), nanLow(a.unadj)) })
	xmax = axisCeil(xmax * 1.05)
	names := make([]string, len(s.Balance))
	for k, b := range s.Balance {
		names[k] = b.Adjustment
	}
	const w, left, right, top, rowH = 900, 230, 40, 58, 20
	h := top + rowH*len(rows) + 44
	plotW := float64(w - left - right)
	xs := func(v float64) float64 { return float64(left) + plotW*math.Min(v, xmax)/xmax }
	p.f("<figure>\n")
	p.svgOpen("fig-balance", w, h, "Absolute standardised mean difference per covariate and adjustment",
		fmt.Sprintf("Dot chart of |SMD| for %d covariates and levels under %s; the dashed line marks the study limit %g. %s",
			len(rows), strings.Join(names, ", "), limit, balanceVerdicts(s)))
	p.legend(float64(left), 20, names)
	// Grid and axis.
	for _, t := range ticks(0, xmax, 6) {
		x := xs(t)
		p.line(x, top-8, x, float64(top+rowH*len(rows)), colGrid, 1, "")
		p.text(x, float64(top+rowH*len(rows)+16), "middle", "small", trimFloat(t))
	}
	p.text(float64(left)+plotW/2, float64(top+rowH*len(rows)+36), "middle", "", "|SMD| (difference in means over the unadjusted pooled SD)")
	for k, r := range rows {
		y := float64(top + rowH*k + rowH/2)
		if k%2 == 0 {
			p.f("<rect x=\"%d\" y=\"%.1f\" width=\"%d\" height=\"%d\" fill=\"#f4f4f4\"/>\n", 10, y-rowH/2, w-20, rowH)
		}
		p.text(float64(left-10), y+4, "end", "", clip(r.label, 32))
		lo, hi := math.Inf(1), math.Inf(-1)
		for _, v := range r.smd {
			if !math.IsNaN(v) {
				lo, hi = math.Min(lo, v), math.Max(hi, v)
			}
		}
		if hi > lo {
			p.line(xs(lo), y, xs(hi), y, "#9a9a9a", 1, "")
		}
	}
	if limit > 0 {
		x := xs(limit)
		p.line(x, top-8, x, float64(top+rowH*len(rows)), colLimit, 2, "5 3")
		p.text(x+4, top-12, "start", "small", fmt.Sprintf("limit %g", limit))
	}
	for k, r := range rows {
		y := float64(top + rowH*k + rowH/2)
		for j, v := range r.smd {
			if math.IsNaN(v) {
				continue
			}
			mark := xs(v)
			if math.IsInf(v, 0) || v > xmax {
				mark = xs(xmax)
			}
			p.marker(p.style(names[j]), mark, y, 5, fmt.Sprintf("%s, %s: |SMD| %.3f", r.label, names[j], v))
		}
	}
	p.f("</svg>\n<figcaption>Each row is a covariate or a level of a categorical covariate, worst before adjustment first. "+
		"Every SMD divides by the unadjusted pooled standard deviation, so the dots of one row compare directly. "+
		"An adjustment passes when every dot sits left of the dashed line at %g (and variance ratios are within %s..%s).</figcaption>\n</figure>\n",
		limit, num(1/s.Gate.VRLimit, 3), num(s.Gate.VRLimit, 3))

	p.f("<table>\n<caption class=\"note\" style=\"text-align:left\">Verdict per adjustment (the gate judges %s)</caption>\n", esc(s.Gate.Adjustment))
	p.f("<tr><th>adjustment</th><th>verdict</th><th class=\"n\">largest |SMD|</th><th>at</th><th class=\"n\">effective n treated</th><th class=\"n\">effective n comparison</th></tr>\n")
	for _, b := range s.Balance {
		cls, verdict := "ok", "passes"
		if !b.Pass {
			cls, verdict = "bad", "fails"
		}
		tr := "<tr>"
		if b.Adjustment == s.Gate.Adjustment {
			tr = "<tr class=\"headline\">"
		}
		p.f("%s<td>%s</td><td class=\"%s\">%s</td><td class=\"n\">%s</td><td>%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td></tr>\n",
			tr, esc(b.Adjustment), cls, verdict, fixed(study.Num(math.Abs(float64(b.WorstSMD))), 3), esc(b.WorstVariable),
			thousands(int(math.Round(float64(b.ESSTreated)))), thousands(int(math.Round(float64(b.ESSControl)))))
	}
	p.f("</table>\n</section>\n")
}

func balanceVerdicts(s *study.Summary) string {
	var parts []string
	for _, b := range s.Balance {
		v := "passes"
		if !b.Pass {
			v = "fails"
		}
		parts = append(parts, fmt.Sprintf("%s %s (largest |SMD| %.3f at %s)", b.Adjustment, v, math.Abs(float64(b.WorstSMD)), b.WorstVariable))
	}
	return strings.Join(parts, "; ") + "."
}

func nanLow(x float64) float64 {
	if math.IsNaN(x) {
		return -1
	}
	return x
}
