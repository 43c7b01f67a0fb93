package report

import (
	"bytes"
	"context"
	"database/sql"
	"encoding/xml"
	"errors"
	"fmt"
	"html"
	"io"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"

	_ "github.com/duckdb/duckdb-go/v2"

	"counterpart/match/balance"
	"counterpart/match/demo"
	"counterpart/match/study"
)

// demoUnits keeps the demo run small: the report's shape, not its
// statistics, is under test.
const demoUnits = 1500

var (
	demoOnce sync.Once
	demoSum  *study.Summary
	demoData *demo.Data
	demoErr  error
)

// demoSummary runs the demo study once per test binary and returns its
// summary with diagnostics.
func demoSummary(t *testing.T) (*study.Summary, *demo.Data) {
	t.Helper()
	demoOnce.Do(func() {
		dir, err := os.MkdirTemp("", "counterpart-report-")
		if err != nil {
			demoErr = err
			return
		}
		defer os.RemoveAll(dir)
		demoSum, demoData, demoErr = runDemo(dir)
	})
	if demoErr != nil {
		t.Fatal(demoErr)
	}
	return demoSum, demoData
}

func runDemo(dir string) (*study.Summary, *demo.Data, error) {
	ctx := context.Background()
	path, data, err := demo.Write(ctx, dir, demoUnits, 11)
	if err != nil {
		return nil, nil, err
	}
	spec, err := study.Load(path)
	if err != nil {
		return nil, nil, err
	}
	wh, err := study.Open(ctx, spec, false)
	if err != nil {
		return nil, nil, err
	}
	sum, err := study.Run(ctx, spec, wh, study.Options{ToolVersion: "report-test"})
	wh.Close()
	// A small demo may fail the balance gate; the summary is complete
	// either way and the report must show the rejection.
	if err != nil && !errors.Is(err, study.ErrRejected) {
		return nil, nil, err
	}
	if sum.Diagnostics == nil {
		// Until the run computes diagnostics itself, rebuild them from
		// what the run published, as a report of a stored run would.
		d, err := diagnosticsFromWarehouse(ctx, filepath.Join(dir, "warehouse.duckdb"), sum.RunID, data)
		if err != nil {
			return nil, nil, err
		}
		sum.Diagnostics = &d
	}
	return sum, data, nil
}

// diagnosticsFromWarehouse reads the run's scores, weights and matches
// back and calls balance.Diagnose with the demo's balance variables.
func diagnosticsFromWarehouse(ctx context.Context, db, runID string, data *demo.Data) (study.Diagnostics, error) {
	conn, err := sql.Open("duckdb", db+"?access_mode=read_only")
	if err != nil {
		return study.Diagnostics{}, err
	}
	defer conn.Close()
	index := map[int64]int{}
	for i, id := range data.MemberID {
		index[id] = i
	}
	n := len(data.MemberID)
	ps := make([]float64, n)
	z := make([]bool, n)
	in := make([]bool, n)
	wt := map[string][]float64{"matched": make([]float64, n), "att": make([]float64, n), "ate": make([]float64, n), "overlap": make([]float64, n)}
	rows, err := conn.QueryContext(ctx, `select s.member_id, s.treated, s.ps, s.in_support, w.att, w.ate, w.overlap
		from main.hf_coaching_scores s join main.hf_coaching_weights w using (run_id, member_id) where s.run_id = ?`, runID)
	if err != nil {
		return study.Diagnostics{}, fmt.Errorf("read scores: %w", err)
	}
	for rows.Next() {
		var id int64
		var p, a, b, c float64
		var tr, sup bool
		if err := rows.Scan(&id, &tr, &p, &sup, &a, &b, &c); err != nil {
			return study.Diagnostics{}, err
		}
		i := index[id]
		ps[i], z[i], in[i] = p, tr, sup
		wt["att"][i], wt["ate"][i], wt["overlap"][i] = a, b, c
	}
	if err := rows.Err(); err != nil {
		return study.Diagnostics{}, err
	}
	rows, err = conn.QueryContext(ctx, `select member_id, sum(set_weight) from main.hf_coaching_matches where run_id = ? group by member_id`, runID)
	if err != nil {
		return study.Diagnostics{}, fmt.Errorf("read matches: %w", err)
	}
	for rows.Next() {
		var id int64
		var w float64
		if err := rows.Scan(&id, &w); err != nil {
			return study.Diagnostics{}, err
		}
		wt["matched"][index[id]] = w
	}
	if err := rows.Err(); err != nil {
		return study.Diagnostics{}, err
	}
	ints := func(x []int64) []float64 {
		out := make([]float64, len(x))
		for i, v := range x {
			out[i] = float64(v)
		}
		return out
	}
	level := func(name string, levels []string, of func(i int) string) []balance.Variable {
		var vs []balance.Variable
		for _, l := range levels {
			v := balance.Variable{Name: name, Level: l, Binary: true, Values: make([]float64, n)}
			for i := range n {
				if of(i) == l {
					v.Values[i] = 1
				}
			}
			vs = append(vs, v)
		}
		return vs
	}
	vars := []balance.Variable{{Name: "age", Values: ints(data.Age)}}
	vars = append(vars, level("sex", []string{"F", "M"}, func(i int) string { return data.Sex[i] })...)
	vars = append(vars, level("region", []string{"coast", "hills", "metro", "plains", "valley"}, func(i int) string { return data.Region[i] })...)
	vars = append(vars, balance.Variable{Name: "prior_admits", Values: ints(data.PriorAdmits)}, balance.Variable{Name: "charlson", Values: ints(data.Charlson)})
	vars = append(vars, level("lives_alone", []string{"false", "true"}, func(i int) string { return strconv.FormatBool(data.LivesAlone[i]) })...)
	vars = append(vars, level("ef_reduced", []string{"false", "true"}, func(i int) string { return strconv.FormatBool(data.EFReduced[i]) })...)
	adj := []study.NamedWeights{{Name: "unadjusted"}}
	for _, a := range []string{"matched", "att", "ate", "overlap"} {
		adj = append(adj, study.NamedWeights{Name: a, W: wt[a]})
	}
	return balance.Diagnose(ps, z, in, vars, adj, 3), nil
}

func renderHTML(t *testing.T, s *study.Summary) string {
	t.Helper()
	var b bytes.Buffer
	if err := HTML(&b, s); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// figures is every chart the report must hold.
var figures = []string{"fig-flow", "fig-balance", "fig-scores", "fig-ecdf", "fig-effects", "fig-survival-readmission"}

// svgInfo is what the XML walk records about one <svg>.
type svgInfo struct {
	id, title, desc string
	marks           int
}

// parseReport parses the page as XML (the renderer writes well-formed
// markup on purpose) and returns its charts and its text.
func parseReport(t *testing.T, page string) ([]svgInfo, string) {
	t.Helper()
	dec := xml.NewDecoder(strings.NewReader(page))
	dec.Strict = true
	dec.Entity = xml.HTMLEntity
	var svgs []svgInfo
	var text strings.Builder
	var stack []string
	for {
		tok, err := dec.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("report is not well-formed: %v", err)
		}
		switch tk := tok.(type) {
		case xml.StartElement:
			stack = append(stack, tk.Name.Local)
			switch tk.Name.Local {
			case "svg":
				info := svgInfo{}
				for _, a := range tk.Attr {
					if a.Name.Local == "id" {
						info.id = a.Value
					}
				}
				svgs = append(svgs, info)
			case "rect", "circle", "polygon", "polyline", "line":
				if len(svgs) > 0 {
					svgs[len(svgs)-1].marks++
				}
			}
		case xml.EndElement:
			stack = stack[:len(stack)-1]
		case xml.CharData:
			text.Write(tk)
			if len(stack) >= 2 && stack[len(stack)-2] == "svg" && len(svgs) > 0 {
				switch stack[len(stack)-1] {
				case "title":
					svgs[len(svgs)-1].title += string(tk)
				case "desc":
					svgs[len(svgs)-1].desc += string(tk)
				}
			}
		}
	}
	return svgs, text.String()
}

// TestHTMLDemoReport renders a real demo run and checks the page's
// promises: every chart with a title and description, nothing fetched,
// the cautions, and no unit's id. (Our own requirements; the XML parse is
// encoding/xml in strict mode.)
func TestHTMLDemoReport(t *testing.T) {
	sum, data := demoSummary(t)
	page := renderHTML(t, sum)
	svgs, text := parseReport(t, page)

	t.Run("charts", func(t *testing.T) {
		var ids []string
		for _, s := range svgs {
			ids = append(ids, s.id)
			if strings.TrimSpace(s.title) == "" || strings.TrimSpace(s.desc) == "" {
				t.Errorf("chart %q lacks a <title> or <desc> (title %q, desc %q)", s.id, s.title, s.desc)
			}
			if s.marks < 10 {
				t.Errorf("chart %q draws only %d marks", s.id, s.marks)
			}
		}
		if !slices.Equal(ids, figures) {
			t.Errorf("charts %v, want %v", ids, figures)
		}
	})
	t.Run("self-contained", func(t *testing.T) {
		rest := strings.ReplaceAll(page, `xmlns="http://www.w3.org/2000/svg"`, "")
		lower := strings.ToLower(rest)
		for _, bad := range []string{"http://", "https://", "<script", "<link", "<iframe", "<img", "<object", "<embed", " src=", " href=", "url(", "@import", "@font-face"} {
			if strings.Contains(lower, bad) {
				i := strings.Index(lower, bad)
				t.Errorf("report contains %q: …%s…", bad, rest[max(0, i-60):min(len(rest), i+60)])
			}
		}
	})
	t.Run("cautions", func(t *testing.T) {
		if !strings.Contains(page, html.EscapeString(Caution)) {
			t.Error("report lacks the caution")
		}
		if sum.Message != "" && !strings.Contains(text, sum.Message) {
			t.Errorf("report lacks the run's message %q", sum.Message)
		}
	})
	t.Run("no unit ids", func(t *testing.T) {
		ids := map[string]bool{}
		for _, id := range data.MemberID {
			ids[strconv.FormatInt(id, 10)] = true
		}
		// Whole alphanumeric tokens: a hex run id may hold six digits in
		// a row without being a number.
		for _, tok := range regexp.MustCompile(`[0-9A-Za-z]+`).FindAllString(page, -1) {
			if ids[tok] {
				i := strings.Index(page, tok)
				t.Fatalf("unit id %s appears in the report: …%s…", tok, page[max(0, i-80):min(len(page), i+80)])
			}
		}
	})
	t.Run("content", func(t *testing.T) {
		for _, want := range []string{sum.Study, sum.RunID, sum.Fingerprint, sum.Engine} {
			if want == "" || !strings.Contains(text, want) {
				t.Errorf("run record lacks %q", want)
			}
		}
		for _, term := range sum.Model.Terms {
			if !strings.Contains(text, term.Name) {
				t.Errorf("model table lacks term %q", term.Name)
			}
		}
		if got := strings.Count(page, "<td>"+html.EscapeString(sum.Effects[0].Outcome)+"</td>"); got < 2 {
			t.Errorf("effect table has %d rows for %s", got, sum.Effects[0].Outcome)
		}
		for _, c := range sum.Diagnostics.Curves {
			if !strings.Contains(text, c.Covariate+" (unadjusted SMD") {
				t.Errorf("eCDF chart lacks covariate %s", c.Covariate)
			}
		}
	})
}

// TestHTMLWithoutDiagnostics: a summary from a run that stopped early (or
// without diagnostics) still renders, with the missing parts said so.
func TestHTMLWithoutDiagnostics(t *testing.T) {
	full, _ := demoSummary(t)
	s := *full
	s.Diagnostics = nil
	page := renderHTML(t, &s)
	svgs, _ := parseReport(t, page)
	if len(svgs) != 4 {
		t.Errorf("%d charts without diagnostics, want 4 (flow, balance, effects, survival)", len(svgs))
	}
	for _, want := range []string{"Score distributions were not computed", "eCDF diagnostics were not computed"} {
		if !strings.Contains(page, want) {
			t.Errorf("report lacks %q", want)
		}
	}
	empty := renderHTML(t, &study.Summary{Study: "s", Status: "failed", Message: "read cohort: no such table"})
	if _, text := parseReport(t, empty); !strings.Contains(text, "read cohort: no such table") {
		t.Error("failed run's message missing")
	}
}

// TestHTMLSensitivityFields: the sensitivity measures recorded on effect
// rows are rendered; rows without any of them are left out, and a run that
// recorded none (NaN, stored as null, or 0 = not computed) says so.
func TestHTMLSensitivityFields(t *testing.T) {
	sum, _ := demoSummary(t)
	s := *sum
	s.Effects = slices.Clone(sum.Effects)
	nan := study.Num(math.NaN())
	for k := range s.Effects {
		s.Effects[k].EValue, s.Effects[k].EValueCI, s.Effects[k].RosenbaumGamma = nan, nan, nan
	}
	s.Effects[0].EValue = 2.375
	s.Effects[0].EValueCI = 1.8
	s.Effects[1].RosenbaumGamma = 1.42
	out := renderHTML(t, &s)
	for _, want := range []string{"<td class=\"n\">2.375</td>", "<td class=\"n\">1.8</td>", "<td class=\"n\">1.42</td>", "E-value (interval limit)", "Rosenbaum Γ"} {
		if !strings.Contains(out, want) {
			t.Errorf("sensitivity section lacks %q", want)
		}
	}
	sec := out[strings.Index(out, `id="h-sens"`):]
	sec = sec[:strings.Index(sec, "</section>")]
	if rows := strings.Count(sec, "<tr>") - 1; rows != 2 {
		t.Errorf("sensitivity table has %d rows, want 2", rows)
	}
	p := &page{s: &study.Summary{Effects: []study.EffectRow{{EValue: nan, EValueCI: nan, RosenbaumGamma: 0}}}}
	p.sensitivity()
	if !strings.Contains(p.b.String(), "This run recorded no sensitivity measures.") {
		t.Error("a run without sensitivity measures (null, or 0 = not computed) should say so")
	}
}
