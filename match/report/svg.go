package report

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// SVG primitives shared by the report's charts: the palette, the
// accessible <svg> opening, text, lines, markers, legends and axis ticks.
// Sections compose these and write no chart markup of their own beyond
// rectangles and paths specific to them.

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
