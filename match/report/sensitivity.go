package report

import (
	"slices"

	"counterpart/match/study"
)

// sensitivityMeasures are the sensitivity columns of an effect row, in the
// order the report shows them.
var sensitivityMeasures = []struct {
	label string
	of    func(study.EffectRow) study.Num
}{
	{"E-value (estimate)", func(e study.EffectRow) study.Num { return e.EValue }},
	{"E-value (interval limit)", func(e study.EffectRow) study.Num { return e.EValueCI }},
	{"Rosenbaum Γ at α = 0.05", func(e study.EffectRow) study.Num { return e.RosenbaumGamma }},
}

// sensitivity tabulates the measures some effect row recorded; a column no
// row recorded is left out, and so is a row that recorded none of the
// columns shown.
func (p *page) sensitivity() {
	s := p.s
	p.f("<section aria-labelledby=\"h-sens\">\n<h2 id=\"h-sens\">Sensitivity to unmeasured confounding</h2>\n")
	var used []int
	for k, m := range sensitivityMeasures {
		if slices.ContainsFunc(s.Effects, func(e study.EffectRow) bool { return recorded(m.of(e)) }) {
			used = append(used, k)
		}
	}
	if len(used) == 0 {
		p.f("<p class=\"note\">This run recorded no sensitivity measures.</p>\n</section>\n")
		return
	}
	p.f("<p>How strong would a confounder the cohort does not hold have to be to explain the estimate away? " +
		"The E-value (VanderWeele &amp; Ding 2017) is the risk ratio such a confounder would need with both treatment and outcome; " +
		"Rosenbaum's Γ (Rosenbaum 2002) is the factor by which the odds of treatment within a matched pair could differ before the result stops being significant. " +
		"Larger values mean a sturdier finding; a value near 1 means a weak confounder could explain it.</p>\n")
	p.f("<table>\n<tr><th>outcome</th><th>contrast</th><th>adjustment</th>")
	for _, k := range used {
		p.f("<th class=\"n\">%s</th>", esc(sensitivityMeasures[k].label))
	}
	p.f("</tr>\n")
	for _, e := range s.Effects {
		if !slices.ContainsFunc(used, func(k int) bool { return recorded(sensitivityMeasures[k].of(e)) }) {
			continue
		}
		p.f("<tr><td>%s</td><td>%s</td><td>%s</td>", esc(e.Outcome), esc(contrastName(e.Contrast)), esc(e.Adjustment))
		for _, k := range used {
			p.f("<td class=\"n\">%s</td>", sensitivityValue(sensitivityMeasures[k].of(e)))
		}
		p.f("</tr>\n")
	}
	p.f("</table>\n</section>\n")
}

// recorded reports whether a sensitivity value was computed: E-values and
// Γ are at least 1 by definition, so NaN (null in a stored summary) and
// numbers below 1 (a zero left by a run that did not compute them) are not.
func recorded(x study.Num) bool { return finite(x) && x >= 1 }

// sensitivityValue shows a measure to four significant digits, or n/a
// when it was not recorded.
func sensitivityValue(x study.Num) string {
	if !recorded(x) {
		return "n/a"
	}
	return num(x, 4)
}
