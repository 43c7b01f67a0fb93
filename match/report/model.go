package report

import (
	"slices"
)

// model shows the propensity fit last on purpose: it is judged by the
// balance above, not by its coefficients.
func (p *page) model() {
	m := p.s.Model
	p.f("<section aria-labelledby=\"h-model\">\n<h2 id=\"h-model\">Propensity model</h2>\n")
	if len(m.Terms) == 0 {
		p.f("<p class=\"note\">The run stopped before the model was fitted.</p>\n</section>\n")
		return
	}
	conv := "converged"
	if !m.Converged {
		conv = "did not converge"
	}
	p.f("<p>%s logistic regression of treatment on the covariates; %s after %d iterations. Log-likelihood %s (intercept only: %s); c-statistic %s.</p>\n",
		esc(m.Kind), conv, m.Iterations, num(m.LogLik, 6), num(m.NullLogLik, 6), fixed(m.CStatistic, 3))
	p.f("<p class=\"note\">The model is a tool for balance, not an explanation of who was treated: judge it by the balance above, not by its coefficients.</p>\n")
	p.f("<table>\n<tr><th>term</th><th class=\"n\">coefficient (log-odds)</th><th class=\"n\">std. error</th></tr>\n")
	for _, t := range m.Terms {
		p.f("<tr><td>%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td></tr>\n", esc(t.Name), num(t.Coef, 4), num(t.SE, 3))
	}
	p.f("</table>\n</section>\n")
}

// timings lists the stages in pipeline order, then any stage a newer run
// records, so an operator sees where a night's minutes went.
func (p *page) timings() {
	t := p.s.Timings
	if len(t) == 0 {
		return
	}
	order := []string{"read", "skip-check", "prior", "design", "fit", "support", "match", "weight", "balance", "diagnostics", "estimate", "bootstrap", "publish"}
	var names []string
	for _, n := range order {
		if _, ok := t[n]; ok {
			names = append(names, n)
		}
	}
	var rest []string
	for n := range t {
		if !slices.Contains(order, n) {
			rest = append(rest, n)
		}
	}
	slices.Sort(rest)
	names = append(names, rest...)
	p.f("<section aria-labelledby=\"h-time\">\n<h2 id=\"h-time\">Stage timings</h2>\n<table>\n<tr><th>stage</th><th class=\"n\">seconds</th></tr>\n")
	for _, n := range names {
		p.f("<tr><td>%s</td><td class=\"n\">%.2f</td></tr>\n", esc(n), t[n])
	}
	// Work beside the stages (the fingerprint hash during the fit) is
	// listed apart: it is not part of the stages' sum.
	var beside []string
	for n := range p.s.Overlapping {
		beside = append(beside, n)
	}
	slices.Sort(beside)
	for _, n := range beside {
		p.f("<tr><td>%s (beside the stages)</td><td class=\"n\">%.2f</td></tr>\n", esc(n), p.s.Overlapping[n])
	}
	p.f("</table>\n</section>\n")
}
