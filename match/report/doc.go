// Package report renders runs for people: the compact terminal summary,
// the self-contained HTML report with inline SVG charts, and the run
// history views (list, detail, diff). It formats what it is given — a
// study.Summary, or runs rows the warehouse returned and study decoded —
// and must not read databases, files or flags, and it never prints a
// unit's row.
//
// The HTML report is one file per concern: html.go lays out the page and
// holds the number formatting, svg.go the chart primitives (palette,
// accessible <svg> opening, text, lines, markers, legends, ticks), and
// each section its own file (header.go, flow.go, balance.go, scores.go,
// ecdf.go, effects.go, sensitivity.go, model.go) as a method on page.
// report.css is the style sheet, embedded and inlined so the page fetches
// nothing. terminal.go is the terminal summary and runs.go the run views.
package report
