package report

import (
	_ "embed"
	"fmt"
	"html"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"

	"counterpart/match/study"
)

// css is the page's one style sheet, inlined in the <head>: a report opens
// offline and fetches nothing, so it cannot be linked.
//
//go:embed report.css
var css string

// HTML writes a run's report as one self-contained HTML file: the run
// record, cautions, the flow of units from cohort to comparison, covariate
// balance, score overlap, eCDF checks, effects, sensitivity, the
// propensity model and stage timings.
//
// Like Terminal it shows counts and aggregates only: the Summary never holds
// a unit's row, and the eCDF grids it draws are pooled quantiles at steps
// of 1% of the cohort (see study.ECDFCurve).
//
// The page fetches nothing: styles are inline, charts are inline SVG built
// here by hand, there is no script and no web font, so it opens the same
// offline, in a mail attachment or behind a locked-down proxy. Hand-built
// SVG rather than a plotting library keeps the module free of a dependency
// for five simple chart types, keeps the file small (tens of kilobytes, no
// embedded raster images) and lets every mark carry a text label and a
// <title>. The markup is also well-formed XML, which the tests use to
// parse it with the standard library.
//
// Colours are the Okabe–Ito palette (Okabe & Ito 2008, "Color Universal
// Design"), distinguishable with the common colour-vision deficiencies;
// shapes and dash patterns repeat what colour says, and every chart has a
// <title> and <desc>.
//
// The page is built in memory and written once, so a failed writer never
// leaves half a section behind a complete-looking header. Writing is the
// only thing that can fail, and the writer's error is returned as it is:
// the caller, which knows the file, names the step.
func HTML(w io.Writer, s *study.Summary) error {
	p := &page{s: s}
	p.adjustments()
	p.document()
	_, err := io.WriteString(w, p.b.String())
	return err
}

// page is one report being built: the Summary it shows, the markup so
// far, and the style fixed for each adjustment so every chart agrees.
type page struct {
	b      strings.Builder
	s      *study.Summary
	styles []adjStyle
}

func (p *page) f(format string, args ...any) { fmt.Fprintf(&p.b, format, args...) }

// document lays out the page. A new section is a method on page in its own
// file, called here in reading order.
func (p *page) document() {
	s := p.s
	p.f("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n")
	p.f("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\n")
	p.f("<title>%s · run %s · counterpart report</title>\n", esc(s.Study), esc(s.RunID))
	p.f("<style>\n%s</style>\n</head>\n<body>\n<main>\n", css)
	p.header()
	p.cautions()
	p.flow()
	p.balance()
	p.scores()
	p.ecdf()
	p.effects()
	p.survival()
	p.sensitivity()
	p.model()
	p.timings()
	p.f("<footer><p>%s</p><p>Made by counterpart from the run's summary: counts and aggregates only, no unit's row. "+
		"This file loads nothing from the network.</p></footer>\n", esc(Caution))
	p.f("</main>\n</body>\n</html>\n")
}

// adjustments fixes each adjustment's style in the order balance lists
// them (unadjusted first), then any only the effects or diagnostics name.
func (p *page) adjustments() {
	add := func(name string) {
		if slices.ContainsFunc(p.styles, func(a adjStyle) bool { return a.name == name }) {
			return
		}
		k := len(p.styles)
		p.styles = append(p.styles, adjStyle{name: name, colour: adjColours[k%len(adjColours)], shape: adjShapes[k%len(adjShapes)]})
	}
	for _, b := range p.s.Balance {
		add(b.Adjustment)
	}
	for _, e := range p.s.Effects {
		add(e.Adjustment)
	}
}

func (p *page) style(name string) adjStyle {
	for _, a := range p.styles {
		if a.name == name {
			return a
		}
	}
	return adjStyle{name: name, colour: colInk, shape: "circle"}
}

// esc escapes text for element content and attribute values.
func esc(s string) string { return html.EscapeString(s) }

// num prints a value with d significant digits; NaN and ±Inf as "n/a".
func num(x study.Num, d int) string {
	f := float64(x)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "n/a"
	}
	return strconv.FormatFloat(f, 'g', d, 64)
}

// fixed prints a value with d decimals; NaN and ±Inf as "n/a".
func fixed(x study.Num, d int) string {
	f := float64(x)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "n/a"
	}
	return strconv.FormatFloat(f, 'f', d, 64)
}

func finite(x study.Num) bool { f := float64(x); return !math.IsNaN(f) && !math.IsInf(f, 0) }
