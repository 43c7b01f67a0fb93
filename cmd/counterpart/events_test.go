package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"counterpart/match/demo"
	"counterpart/match/study"
	"counterpart/warehouse"
	"counterpart/warehouse/postgres/pgtest"
)

// TestEventsSameOnBothEngines runs the demo study, with its time-to-event
// and rate outcomes, on DuckDB and on Postgres loaded with the same rows,
// and demands the same effects rows on both (relative 1e-9; issue
// acceptance) and the same number of survival-table rows.
func TestEventsSameOnBothEngines(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	path, d, err := demo.Write(ctx, dir, 3000, 5)
	if err != nil {
		t.Fatal(err)
	}
	pg := pgtest.NewDatabase(t)
	pgtest.Exec(t, pg, "CREATE SCHEMA marts")
	cols := demo.Columns(d)
	for i, c := range cols {
		// Postgres spellings that take the Go values as they are.
		cols[i].Type = map[string]string{"INTEGER": "BIGINT", "DOUBLE": "DOUBLE PRECISION", "VARCHAR": "TEXT"}[c.Type]
		if cols[i].Type == "" {
			cols[i].Type = c.Type
		}
	}
	if err := warehouse.LoadTable(ctx, "postgres", pg, "marts", "hf_members", demo.TableComment, cols); err != nil {
		t.Fatal(err)
	}
	text, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	// One canonical row order on both engines (order independence is a
	// later issue's).
	duck := strings.Replace(string(text), "from marts.hf_members", "from marts.hf_members order by member_id", 1)
	pgText := strings.NewReplacer("engine: duckdb ", "engine: postgres", "dsn: warehouse.duckdb", "dsn: "+pg, "schema: main", "schema: public").Replace(duck)
	runs := map[string]study.Summary{}
	for engine, body := range map[string]string{"duckdb": duck, "postgres": pgText} {
		spec := filepath.Join(dir, engine+".yaml")
		if err := os.WriteFile(spec, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		var stdout, stderr bytes.Buffer
		if code := run(ctx, []string{"counterpart", "run", "--json", spec}, &stdout, &stderr); code != exitOK {
			t.Fatalf("%s: exit %d: %s", engine, code, stderr.String())
		}
		var sum study.Summary
		if err := json.Unmarshal(stdout.Bytes(), &sum); err != nil {
			t.Fatal(err)
		}
		if sum.Engine != engine {
			t.Fatalf("ran on %s, want %s", sum.Engine, engine)
		}
		runs[engine] = sum
	}
	a, b := runs["duckdb"].Effects, runs["postgres"].Effects
	if len(a) != len(b) || len(a) == 0 {
		t.Fatalf("%d effects rows on duckdb, %d on postgres", len(a), len(b))
	}
	events := 0
	for i := range a {
		x, y := a[i], b[i]
		key := fmt.Sprintf("%s %s %s", x.Outcome, x.Adjustment, x.Contrast)
		if x.Horizon != nil {
			key += fmt.Sprintf(" at %g", float64(*x.Horizon))
			events++
		}
		if x.Outcome != y.Outcome || x.Adjustment != y.Adjustment || x.Contrast != y.Contrast {
			t.Fatalf("row %d: %s on duckdb, %s %s %s on postgres", i, key, y.Outcome, y.Adjustment, y.Contrast)
		}
		for _, v := range [][3]any{{"estimate", x.Estimate, y.Estimate}, {"SE", x.SE, y.SE}, {"CI low", x.CILow, y.CILow}, {"CI high", x.CIHigh, y.CIHigh}} {
			p, q := float64(v[1].(study.Num)), float64(v[2].(study.Num))
			if math.IsNaN(p) && math.IsNaN(q) {
				continue
			}
			if math.Abs(p-q) > 1e-9*math.Max(1, math.Abs(p)) {
				t.Errorf("%s %s: duckdb %v, postgres %v", key, v[0], p, q)
			}
		}
	}
	if events == 0 {
		t.Fatal("no horizon rows: the demo study lost its time-to-event outcome")
	}
	n := pgtest.Query(t, pg, "SELECT count(*) FROM public.hf_coaching_current_survival")
	if fmt.Sprint(n) == "[[0]]" {
		t.Errorf("the Postgres survival view is empty: %v", n)
	}
}
