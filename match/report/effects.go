package report

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"counterpart/match/study"
)

// effects draws one interval chart per outcome and contrast (each its own
// scale: outcomes have different units; ratios are drawn on a log scale
// around 1) and the full table.
func (p *page) effects() {
	s := p.s
	p.f("<section aria-labelledby=\"h-effects\">\n<h2 id=\"h-effects\">Estimated effects</h2>\n")
	if len(s.Effects) == 0 {
		p.f("<p class=\"note\">No effect was estimated in this run.</p>\n</section>\n")
		return
	}
	type group struct {
		outcome, contrast string
		horizon           *study.Num
		rows              []study.EffectRow
	}
	sameHorizon := func(a, b *study.Num) bool { return (a == nil) == (b == nil) && (a == nil || *a == *b) }
	var groups []*group
	for _, e := range s.Effects {
		k := slices.IndexFunc(groups, func(g *group) bool {
			return g.outcome == e.Outcome && g.contrast == e.Contrast && sameHorizon(g.horizon, e.Horizon)
		})
		if k < 0 {
			groups = append(groups, &group{outcome: e.Outcome, contrast: e.Contrast, horizon: e.Horizon})
			k = len(groups) - 1
		}
		groups[k].rows = append(groups[k].rows, e)
	}
	p.f("<p>Treated compared with comparison, with 95%% confidence intervals: differences are treated minus comparison, ratios treated over comparison. "+
		"The headline adjustment is <strong>%s</strong>; the others show how much the answer depends on the choice.</p>\n", esc(s.Primary))
	const w, left, right, rowH, groupPad = 900, 150, 230, 22, 54
	h := 20
	for _, g := range groups {
		h += groupPad + len(g.rows)*rowH
	}
	var desc []string
	for _, e := range s.Effects {
		if e.Adjustment == s.Primary {
			desc = append(desc, fmt.Sprintf("%s %s: %s [%s, %s]", e.Outcome, contrastName(e.Contrast), num(e.Estimate, 4), num(e.CILow, 4), num(e.CIHigh, 4)))
		}
	}
	p.f("<figure>\n")
	p.svgOpen("fig-effects", w, h, "Effect estimates with 95% confidence intervals per outcome and adjustment",
		"Interval chart per outcome and contrast; headline ("+s.Primary+") estimates: "+strings.Join(desc, "; ")+".")
	plotW := float64(w - left - right)
	y := 20.0
	for _, g := range groups {
		ratio := isRatio(g.contrast)
		ref := 0.0
		if ratio {
			ref = 1
		}
		lo, hi := ref, ref
		for _, e := range g.rows {
			for _, v := range []study.Num{e.CILow, e.CIHigh, e.Estimate} {
				if finite(v) && (!ratio || v > 0) {
					lo, hi = math.Min(lo, float64(v)), math.Max(hi, float64(v))
				}
			}
		}
		tr := func(v float64) float64 { return v }
		if ratio {
			tr = math.Log
		}
		pad := (tr(hi) - tr(lo)) * 0.06
		if pad == 0 {
			pad = 1
		}
		tlo, thi := tr(lo)-pad, tr(hi)+pad
		xs := func(v float64) float64 {
			return float64(left) + plotW*(math.Min(math.Max(tr(v), tlo), thi)-tlo)/(thi-tlo)
		}
		title := g.outcome
		if g.contrast != "" {
			title += " · " + contrastName(g.contrast)
		}
		if g.horizon != nil {
			title += " at " + trimFloat(float64(*g.horizon))
		}
		p.text(10, y+14, "start", "head", title)
		top := y + 24
		bottom := top + float64(len(g.rows)*rowH)
		var tk []float64
		if ratio {
			tk = ratioTicks(lo, hi)
		} else {
			tk = ticks(tlo, thi, 5)
		}
		for _, t := range tk {
			p.line(xs(t), top, xs(t), bottom, colGrid, 1, "")
			p.text(xs(t), bottom+14, "middle", "small", trimFloat(t))
		}
		p.line(xs(ref), top-4, xs(ref), bottom, colInk, 1.2, "")
		p.text(xs(ref), top-8, "middle", "small", "no difference")
		for k, e := range g.rows {
			ry := top + float64(k*rowH) + rowH/2
			a := p.style(e.Adjustment)
			label := e.Adjustment
			cls := ""
			if e.Adjustment == s.Primary {
				label += " (headline)"
				cls = "head"
			}
			p.text(float64(left-10), ry+4, "end", cls, label)
			if finite(e.CILow) && finite(e.CIHigh) {
				p.line(xs(float64(e.CILow)), ry, xs(float64(e.CIHigh)), ry, a.colour, 2.5, "")
				p.line(xs(float64(e.CILow)), ry-4, xs(float64(e.CILow)), ry+4, a.colour, 1.5, "")
				p.line(xs(float64(e.CIHigh)), ry-4, xs(float64(e.CIHigh)), ry+4, a.colour, 1.5, "")
			}
			if finite(e.Estimate) {
				p.marker(a, xs(float64(e.Estimate)), ry, 5.5, fmt.Sprintf("%s, %s: %s [%s, %s]", g.outcome, e.Adjustment, num(e.Estimate, 4), num(e.CILow, 4), num(e.CIHigh, 4)))
			}
			p.text(float64(w-right+12), ry+4, "start", cls, fmt.Sprintf("%s  [%s, %s]", effectNum(e.Estimate, ratio), effectNum(e.CILow, ratio), effectNum(e.CIHigh, ratio)))
		}
		y = bottom + groupPad - 24
	}
	p.f("</svg>\n<figcaption>Each outcome and contrast has its own scale; ratios use a log scale, so intervals look symmetric around the estimate. " +
		"The unadjusted row is the naive comparison, kept to show how much adjustment moved the estimate.</figcaption>\n</figure>\n")

	var methods []string
	p.f("<div class=\"wide\"><table>\n<tr><th>outcome</th><th>contrast</th><th>adjustment</th><th>estimand</th><th class=\"n\">estimate</th><th class=\"n\">95%% interval</th><th class=\"n\">std. error</th><th class=\"n\">p</th>" +
		"<th class=\"n\">n treated / comparison</th><th class=\"n\">outcome missing</th><th class=\"n\">SE note</th></tr>\n")
	for _, g := range groups {
		ratio := isRatio(g.contrast)
		for _, e := range g.rows {
			tr := "<tr>"
			if e.Adjustment == s.Primary {
				tr = "<tr class=\"headline\">"
			}
			m := slices.Index(methods, e.Method)
			if m < 0 {
				methods = append(methods, e.Method)
				m = len(methods) - 1
			}
			p.f("%s<td>%s</td><td>%s</td><td>%s</td><td>%s</td><td class=\"n\">%s</td><td class=\"n\">[%s, %s]</td><td class=\"n\">%s</td><td class=\"n\">%s</td><td class=\"n\">%s / %s</td><td class=\"n\">%s</td><td class=\"n\">%d</td></tr>\n",
				tr, esc(e.Outcome), esc(contrastLabel(e)), esc(e.Adjustment), esc(e.Estimand), effectNum(e.Estimate, ratio), effectNum(e.CILow, ratio), effectNum(e.CIHigh, ratio),
				num(e.SE, 3), pValue(e.P), thousands(e.NTreated), thousands(e.NControl), thousands(e.NMissing), m+1)
		}
	}
	p.f("</table></div>\n<p class=\"note\">SE notes: how each standard error was computed.</p>\n<ol class=\"note\">\n")
	for _, m := range methods {
		p.f("<li>%s</li>\n", esc(m))
	}
	p.f("</ol>\n</section>\n")
}

// isRatio reports whether a contrast is a ratio (risk_ratio, odds_ratio).
func isRatio(contrast string) bool { return strings.HasSuffix(contrast, "ratio") }

// contrastName spells a contrast for people: "risk_ratio" → "risk ratio".
func contrastName(c string) string {
	if c == "" {
		return "difference"
	}
	return strings.ReplaceAll(c, "_", " ")
}

// contrastLabel is a row's contrast with its horizon, if it has one.
func contrastLabel(e study.EffectRow) string {
	if e.Horizon == nil {
		return contrastName(e.Contrast)
	}
	return contrastName(e.Contrast) + " at " + trimFloat(float64(*e.Horizon))
}

// effectNum prints a difference with its sign and a ratio without.
func effectNum(x study.Num, ratio bool) string {
	if ratio {
		return num(x, 4)
	}
	return signedNum(x)
}

// ratioTicks picks round ratios between lo and hi for a log axis.
func ratioTicks(lo, hi float64) []float64 {
	var out []float64
	for _, t := range []float64{0.01, 0.02, 0.05, 0.1, 0.2, 0.25, 0.5, 0.67, 0.8, 1, 1.25, 1.5, 2, 3, 4, 5, 10, 20, 50, 100} {
		if t >= lo*0.999 && t <= hi*1.001 {
			out = append(out, t)
		}
	}
	for len(out) > 7 {
		var thin []float64
		for k, t := range out {
			if k%2 == 0 || t == 1 {
				thin = append(thin, t)
			}
		}
		out = thin
	}
	return out
}

func signedNum(x study.Num) string { return signed(float64(x)) }

func pValue(x study.Num) string {
	f := float64(x)
	switch {
	case math.IsNaN(f):
		return "n/a"
	case f < 0.0001:
		return "&lt; 0.0001"
	}
	return strconv.FormatFloat(f, 'f', 4, 64)
}
