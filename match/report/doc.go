// Package report renders a run's summary for people: the compact terminal
// summary and the self-contained HTML report with inline SVG charts. It
// formats what it is given and must not read databases, files or flags,
// and it never prints a unit's row.
package report
