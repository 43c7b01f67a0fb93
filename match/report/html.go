package report

import (
	"cmp"
	"encoding/json"
	"fmt"
	"html"
	"io"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"counterpart/match/study"
)

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
// Fields that a Summary may not carry yet — tool_version, spec_sha256 and
// the sensitivity measures e_value, e_value_ci, rosenbaum_gamma on effect
// rows (top level or inside a nested object) — are read from the
// Summary's JSON, so the report shows them as soon as a run records them.
func HTML(w io.Writer, s *study.Summary) error {
	x, err := extrasOf(s)
	if err != nil {
		return fmt.Errorf("html report: %w", err)
	}
	p := &page{s: s, x: x}
	p.adjustments()
	p.document()
	if _, err := io.WriteString(w, p.b.String()); err != nil {
		return fmt.Errorf("html report: write: %w", err)
	}
	return nil
}

// extras are the Summary fields HTML renders when present.
type extras struct {
	ToolVersion string `json:"tool_version"`
	SpecSHA     string `json:"spec_sha256"`
	// Sensitivity[i] holds the measures found on effect row i.
	Sensitivity []map[string]json.RawMessage
}

// sensitivityKeys are the JSON names of the sensitivity measures, in the
// order the report shows them.
var sensitivityKeys = []struct{ key, label string }{
	{"e_value", "E-value (estimate)"},
	{"e_value_ci", "E-value (interval limit)"},
	{"rosenbaum_gamma", "Rosenbaum Γ at α = 0.05"},
}

func extrasOf(s *study.Summary) (extras, error) {
	b, err := json.Marshal(s)
	if err != nil {
		return extras{}, fmt.Errorf("encode summary: %w", err)
	}
	return extrasFromJSON(b)
}

// extrasFromJSON reads the extras from a Summary's JSON.
func extrasFromJSON(b []byte) (extras, error) {
	var x extras
	var raw struct {
		ToolVersion string                       `json:"tool_version"`
		SpecSHA     string                       `json:"spec_sha256"`
		Effects     []map[string]json.RawMessage `json:"effects"`
	}
	if err := json.Unmarshal(b, &raw); err != nil {
		return x, fmt.Errorf("decode summary: %w", err)
	}
	x.ToolVersion, x.SpecSHA = raw.ToolVersion, raw.SpecSHA
	for _, row := range raw.Effects {
		found := map[string]json.RawMessage{}
		var look func(m map[string]json.RawMessage, depth int)
		look = func(m map[string]json.RawMessage, depth int) {
			for _, k := range sensitivityKeys {
				if v, ok := m[k.key]; ok {
					found[k.key] = v
				}
			}
			if depth > 0 {
				return
			}
			for _, v := range m {
				var nested map[string]json.RawMessage
				if json.Unmarshal(v, &nested) == nil {
					look(nested, depth+1)
				}
			}
		}
		look(row, 0)
		x.Sensitivity = append(x.Sensitivity, found)
	}
	return x, nil
}

// Okabe–Ito colours.
const (
	colTreated    = "#D55E00" // vermillion
	colComparison = "#0072B2" // blue
	colLimit      = "#CC79A7" // reddish purple
	colInk        = "#222222"
	colMuted      = "#6b6b6b"
	colGrid       = "#e4e4e4"
)

// adjStyle is how one adjustment is drawn wherever adjustments share a
// chart: a colour and a shape, so neither alone carries the meaning.
type adjStyle struct {
	name, colour, shape string
}

var (
	adjColours = []string{"#000000", "#E69F00", "#56B4E9", "#009E73", "#CC79A7", "#0072B2", "#D55E00", "#F0E442"}
	adjShapes  = []string{"circle", "square", "triangle", "diamond", "down", "plus", "cross", "star"}
)

type page struct {
	b      strings.Builder
	s      *study.Summary
	x      extras
	styles []adjStyle
}

func (p *page) f(format string, args ...any) { fmt.Fprintf(&p.b, format, args...) }

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

const css = `
:root { color-scheme: light; }
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif;
  color: #222; background: #fff; margin: 0; }
main { max-width: 1080px; margin: 0 auto; padding: 24px 28px 48px; }
h1 { font-size: 26px; margin: 0 0 4px; }
h2 { font-size: 19px; margin: 36px 0 8px; padding-top: 8px; border-top: 2px solid #222; }
h3 { font-size: 15px; margin: 18px 0 6px; }
p.lede { margin: 0 0 16px; color: #444; }
.badge { display: inline-block; padding: 1px 10px; border-radius: 10px; font-weight: 600; font-size: 13px;
  border: 2px solid currentColor; }
.ok { color: #00704f; } .bad { color: #a63c00; } .neutral { color: #444; }
table { border-collapse: collapse; margin: 6px 0 12px; font-size: 13px; }
ol.note { font-size: 12.5px; margin: 0 0 8px; padding-left: 22px; }
th, td { padding: 3px 10px 3px 0; text-align: left; vertical-align: top; }
th { font-weight: 600; border-bottom: 1px solid #999; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; padding-left: 10px; }
td.n { white-space: nowrap; }
.wide { overflow-x: auto; }
tr.headline td { font-weight: 600; }
table.record th { border: 0; color: #555; font-weight: 500; padding-right: 18px; }
code { font-size: 12.5px; word-break: break-all; }
.cautions { border-left: 5px solid #E69F00; background: #fff8e6; padding: 10px 16px; margin: 16px 0; }
.cautions li { margin: 3px 0; }
figure { margin: 10px 0 14px; }
figcaption { font-size: 13px; color: #444; margin-top: 4px; max-width: 860px; }
svg { display: block; max-width: 100%; height: auto; }
svg text { font-family: system-ui, -apple-system, "Segoe UI", Roboto, Arial, sans-serif; font-size: 12px; fill: #222; }
svg text.small { font-size: 11px; fill: #555; }
svg text.head { font-weight: 600; }
.note { color: #555; font-size: 13.5px; }
footer { margin-top: 40px; font-size: 12.5px; color: #555; border-top: 1px solid #ccc; padding-top: 8px; }
`

func (p *page) document() {
	s := p.s
	p.f("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n")
	p.f("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\n")
	p.f("<title>%s · run %s · counterpart report</title>\n", esc(s.Study), esc(s.RunID))
	p.f("<style>%s</style>\n</head>\n<body>\n<main>\n", css)
	p.header()
	p.cautions()
	p.flow()
	p.balance()
	p.scores()
	p.ecdf()
	p.effects()
	p.sensitivity()
	p.model()
	p.timings()
	p.f("<footer><p>%s</p><p>Made by counterpart from the run's summary: counts and aggregates only, no unit's row. "+
		"This file loads nothing from the network.</p></footer>\n", esc(Caution))
	p.f("</main>\n</body>\n</html>\n")
}

func statusClass(status string) string {
	switch status {
	case "succeeded", "dry-run":
		return "ok"
	case "rejected", "failed":
		return "bad"
	}
	return "neutral"
}

func (p *page) header() {
	s := p.s
	status := s.Status
	if status == "" {
		status = "not recorded"
	}
	p.f("<header>\n<h1>%s</h1>\n", esc(s.Study))
	p.f("<p class=\"lede\">Comparison report for run <code>%s</code> <span class=\"badge %s\">%s</span></p>\n", esc(s.RunID), statusClass(s.Status), esc(status))
	p.f("<table class=\"record\" aria-label=\"run record\">\n")
	row := func(k, v string) { p.f("<tr><th scope=\"row\">%s</th><td>%s</td></tr>\n", esc(k), v) }
	orNot := func(v string) string {
		if v == "" {
			return "<span class=\"note\">not recorded</span>"
		}
		return "<code>" + esc(v) + "</code>"
	}
	row("study", esc(s.Study))
	row("run id", orNot(s.RunID))
	row("status", esc(status))
	row("engine", esc(s.Engine))
	row("started", esc(stamp(s.StartedAt)))
	row("finished", esc(stamp(s.FinishedAt)))
	if !s.StartedAt.IsZero() && !s.FinishedAt.IsZero() {
		row("wall time", esc(s.FinishedAt.Sub(s.StartedAt).Round(time.Millisecond).String()))
	}
	row("tool version", orNot(p.x.ToolVersion))
	row("study file SHA-256", orNot(p.x.SpecSHA))
	row("cohort fingerprint", orNot(s.Fingerprint))
	row("headline", esc(fmt.Sprintf("%s (estimand %s)", s.Primary, s.Estimand)))
	if s.DryRun {
		row("dry run", "yes: nothing was written to the warehouse")
	}
	p.f("</table>\n</header>\n")
}

func stamp(t time.Time) string {
	if t.IsZero() {
		return "not recorded"
	}
	return t.UTC().Format("2006-01-02 15:04:05 UTC")
}

func (p *page) cautions() {
	s := p.s
	p.f("<section aria-labelledby=\"h-cautions\">\n<h2 id=\"h-cautions\">Before reading the numbers</h2>\n<div class=\"cautions\"><ul>\n")
	if s.Message != "" {
		p.f("<li><strong>Run note:</strong> %s</li>\n", esc(s.Message))
	}
	if !s.Gate.Pass && s.Gate.Message != "" && s.Gate.Message != s.Message {
		p.f("<li><strong>Balance gate:</strong> %s</li>\n", esc(s.Gate.Message))
	}
	p.f("<li>%s</li>\n", esc(Caution))
	p.f("<li>Balance on measured covariates is necessary, not sufficient: it says nothing about covariates the cohort does not hold.</li>\n")
	if s.Support.Dropped > 0 {
		p.f("<li>%s units fell outside common support and are not part of any adjusted comparison; the estimates describe the units that remain.</li>\n", thousands(s.Support.Dropped))
	}
	if m := s.Matching; m != nil && m.UnmatchedTreated > 0 {
		p.f("<li>%s treated units found no comparison unit within the caliper; the matched estimate describes the matched treated units only.</li>\n", thousands(m.UnmatchedTreated))
	}
	p.f("</ul></div>\n</section>\n")
}

// svgOpen starts a chart with its accessible title and description.
func (p *page) svgOpen(id string, w, h int, title, desc string) {
	p.f("<svg xmlns=\"http://www.w3.org/2000/svg\" id=\"%s\" viewBox=\"0 0 %d %d\" width=\"%d\" height=\"%d\" role=\"img\" aria-labelledby=\"%s-title %s-desc\">\n",
		id, w, h, w, h, id, id)
	p.f("<title id=\"%s-title\">%s</title>\n<desc id=\"%s-desc\">%s</desc>\n", id, esc(title), id, esc(desc))
}

func (p *page) text(x, y float64, anchor, class, s string) {
	cl := ""
	if class != "" {
		cl = " class=\"" + class + "\""
	}
	p.f("<text x=\"%.1f\" y=\"%.1f\" text-anchor=\"%s\"%s>%s</text>\n", x, y, anchor, cl, esc(s))
}

func (p *page) line(x1, y1, x2, y2 float64, colour string, width float64, dash string) {
	d := ""
	if dash != "" {
		d = " stroke-dasharray=\"" + dash + "\""
	}
	p.f("<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" stroke=\"%s\" stroke-width=\"%.1f\"%s/>\n", x1, y1, x2, y2, colour, width, d)
}

// marker draws one adjustment's symbol centred at (x, y), with a tooltip.
func (p *page) marker(a adjStyle, x, y, r float64, tip string) {
	attrs := fmt.Sprintf("fill=\"%s\" stroke=\"#222\" stroke-width=\"0.8\"", a.colour)
	open := func(tag string) string { return "<" + tag + " " + attrs }
	var el string
	switch a.shape {
	case "square":
		el = fmt.Sprintf("%s x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\">", open("rect"), x-r*0.85, y-r*0.85, 1.7*r, 1.7*r)
		el += "<title>" + esc(tip) + "</title></rect>"
	case "circle":
		el = fmt.Sprintf("%s cx=\"%.1f\" cy=\"%.1f\" r=\"%.1f\">", open("circle"), x, y, r)
		el += "<title>" + esc(tip) + "</title></circle>"
	default:
		var pts [][2]float64
		switch a.shape {
		case "triangle":
			pts = [][2]float64{{0, -1.15}, {1.05, 0.8}, {-1.05, 0.8}}
		case "down":
			pts = [][2]float64{{0, 1.15}, {1.05, -0.8}, {-1.05, -0.8}}
		case "diamond":
			pts = [][2]float64{{0, -1.2}, {1.2, 0}, {0, 1.2}, {-1.2, 0}}
		case "plus":
			pts = [][2]float64{{-0.35, -1.1}, {0.35, -1.1}, {0.35, -0.35}, {1.1, -0.35}, {1.1, 0.35}, {0.35, 0.35}, {0.35, 1.1}, {-0.35, 1.1}, {-0.35, 0.35}, {-1.1, 0.35}, {-1.1, -0.35}, {-0.35, -0.35}}
		case "cross":
			pts = [][2]float64{{-1, -0.5}, {-0.5, -1}, {0, -0.5}, {0.5, -1}, {1, -0.5}, {0.5, 0}, {1, 0.5}, {0.5, 1}, {0, 0.5}, {-0.5, 1}, {-1, 0.5}, {-0.5, 0}}
		default: // star
			for k := range 10 {
				rr := 1.2
				if k%2 == 1 {
					rr = 0.5
				}
				a := math.Pi/2 + float64(k)*math.Pi/5
				pts = append(pts, [2]float64{rr * math.Cos(a), -rr * math.Sin(a)})
			}
		}
		var sb strings.Builder
		for k, pt := range pts {
			if k > 0 {
				sb.WriteByte(' ')
			}
			fmt.Fprintf(&sb, "%.1f,%.1f", x+pt[0]*r, y+pt[1]*r)
		}
		el = fmt.Sprintf("%s points=\"%s\">", open("polygon"), sb.String()) + "<title>" + esc(tip) + "</title></polygon>"
	}
	p.f("%s\n", el)
}

// legend draws the adjustments' symbols in one row starting at (x, y).
func (p *page) legend(x, y float64, names []string) {
	for _, n := range names {
		a := p.style(n)
		p.marker(a, x+6, y-4, 5, n)
		p.text(x+15, y, "start", "", n)
		x += 26 + 7.2*float64(len(n))
	}
}

// armLegend draws the treated / comparison key at (x, y).
func (p *page) armLegend(x, y float64, dashed bool) {
	p.line(x, y-4, x+22, y-4, colTreated, 2.5, "")
	p.text(x+27, y, "start", "", "treated")
	dash := ""
	if dashed {
		dash = "6 3"
	}
	p.line(x+95, y-4, x+117, y-4, colComparison, 2.5, dash)
	p.text(x+122, y, "start", "", "comparison")
}

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

// wrapLines breaks s into at most k lines of about width characters, the
// last one clipped.
func wrapLines(s string, width, k int) []string {
	var lines []string
	for _, ln := range strings.Split(wrap(s, width), "\n") {
		if len(lines) == k {
			lines[k-1] = clip(lines[k-1]+" "+ln, width)
			continue
		}
		lines = append(lines, ln)
	}
	return lines
}

func clip(s string, n int) string {
	r := []rune(s)
	if len(r) <= n || n < 2 {
		return s
	}
	return string(r[:n-1]) + "…"
}

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

// niceCeil rounds x up to 1, 2, 2.5 or 5 times a power of ten.
func niceCeil(x float64) float64 {
	if !(x > 0) || math.IsInf(x, 0) {
		return 1
	}
	e := math.Pow(10, math.Floor(math.Log10(x)))
	for _, m := range []float64{1, 2, 2.5, 5, 10} {
		if m*e >= x*(1-1e-12) {
			return m * e
		}
	}
	return 10 * e
}

// axisCeil rounds x up to a short number (1, 1.2, 1.5, 2, 2.5, 3, 4, 5,
// 6 or 8 times a power of ten), tighter than niceCeil so a chart's axis
// does not run far past its largest value.
func axisCeil(x float64) float64 {
	if !(x > 0) || math.IsInf(x, 0) {
		return 1
	}
	e := math.Pow(10, math.Floor(math.Log10(x)))
	for _, m := range []float64{1, 1.2, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10} {
		if m*e >= x*(1-1e-12) {
			return m * e
		}
	}
	return 10 * e
}

// ticks returns about n round values from lo to hi inclusive.
func ticks(lo, hi float64, n int) []float64 {
	if !(hi > lo) {
		return []float64{lo}
	}
	step := niceCeil((hi - lo) / float64(n))
	var out []float64
	for t := math.Ceil(lo/step) * step; t <= hi+step*1e-9; t += step {
		out = append(out, t)
	}
	return out
}

func trimFloat(x float64) string {
	if math.Abs(x) < 1e-12 {
		return "0"
	}
	return strconv.FormatFloat(x, 'g', 4, 64)
}

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
		rows              []study.EffectRow
	}
	var groups []*group
	for _, e := range s.Effects {
		k := slices.IndexFunc(groups, func(g *group) bool { return g.outcome == e.Outcome && g.contrast == e.Contrast })
		if k < 0 {
			groups = append(groups, &group{outcome: e.Outcome, contrast: e.Contrast})
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
				tr, esc(e.Outcome), esc(contrastName(e.Contrast)), esc(e.Adjustment), esc(e.Estimand), effectNum(e.Estimate, ratio), effectNum(e.CILow, ratio), effectNum(e.CIHigh, ratio),
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

func (p *page) sensitivity() {
	s := p.s
	p.f("<section aria-labelledby=\"h-sens\">\n<h2 id=\"h-sens\">Sensitivity to unmeasured confounding</h2>\n")
	var used []int
	for k, key := range sensitivityKeys {
		for _, m := range p.x.Sensitivity {
			if recorded(m[key.key]) {
				used = append(used, k)
				break
			}
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
		p.f("<th class=\"n\">%s</th>", esc(sensitivityKeys[k].label))
	}
	p.f("</tr>\n")
	for i, e := range s.Effects {
		if i >= len(p.x.Sensitivity) || !slices.ContainsFunc(used, func(k int) bool { return recorded(p.x.Sensitivity[i][sensitivityKeys[k].key]) }) {
			continue
		}
		p.f("<tr><td>%s</td><td>%s</td><td>%s</td>", esc(e.Outcome), esc(contrastName(e.Contrast)), esc(e.Adjustment))
		for _, k := range used {
			p.f("<td class=\"n\">%s</td>", rawValue(p.x.Sensitivity[i][sensitivityKeys[k].key]))
		}
		p.f("</tr>\n")
	}
	p.f("</table>\n</section>\n")
}

// recorded reports whether a sensitivity value was computed: E-values and
// Γ are at least 1 by definition, so null, absent, and numbers below 1
// (a zero value left by a run that did not compute them) are not.
func recorded(v json.RawMessage) bool {
	if len(v) == 0 || string(v) == "null" {
		return false
	}
	var f float64
	if json.Unmarshal(v, &f) == nil {
		return f >= 1
	}
	return true
}

// rawValue shows a JSON value: numbers to four significant digits, null
// absent and below 1 as n/a, anything else as its text.
func rawValue(v json.RawMessage) string {
	if !recorded(v) {
		return "n/a"
	}
	var f float64
	if json.Unmarshal(v, &f) == nil {
		return strconv.FormatFloat(f, 'g', 4, 64)
	}
	var str string
	if json.Unmarshal(v, &str) == nil {
		return esc(str)
	}
	return "<code>" + esc(string(v)) + "</code>"
}

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

func (p *page) timings() {
	t := p.s.Timings
	if len(t) == 0 {
		return
	}
	order := []string{"read", "fit", "match", "weight", "estimate", "publish"}
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
	p.f("</table>\n</section>\n")
}
