package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"testing"
	"time"
)

// TestWideCategoricalRefused is the case: a 20,000-unit cohort
// with a 5,000-level categorical covariate is refused with exit 2 and one
// stderr line naming the column, its level count and the fix, in under 5
// s (a generous deadline: the refusal comes before any design is built);
// with cohort.rare_levels the same cohort runs, its rare levels pooled and
// reported.
func TestWideCategoricalRefused(t *testing.T) {
	const units = 20000
	// Half the units share five common levels; the other half spread over
	// 4,995 levels of about two units each.
	level := "CASE WHEN i <= 10000 THEN 'c' || (i % 5) ELSE 'z' || (i % 4995) END"
	dsn := faultEngines()[0].setup(t, units, level)
	base := strings.Replace(studyText("wide", "duckdb", dsn), "x1, x2, region, y_cont", "x1, x2, region, grp, y_cont", 1)
	base = strings.Replace(base, "covariates: [x1, x2, region]", "covariates: [x1, x2, region, grp]", 1)
	for _, tc := range []struct {
		name, extra string
		code        int
		want        []string // in the one stderr line
	}{
		{"refused", "", exitBadInput, []string{"grp", "5000 levels", "cohort.rare_levels", "cohort.max_levels"}},
		{"too many terms", "  rare_levels: 10\nscore:\n  max_terms: 5\n", exitBadInput, []string{"10 columns", "score.max_terms (5)", "grp with 6 levels"}},
		{"rare levels pooled", "  rare_levels: 10\n", exitOK, nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			text := strings.Replace(base, "covariates: [x1, x2, region, grp]\n", "covariates: [x1, x2, region, grp]\n"+tc.extra, 1)
			spec := writeStudy(t, text)
			var out, errb bytes.Buffer
			start := time.Now()
			code := run(context.Background(), []string{"counterpart", "run", "--json", spec}, &out, &errb)
			took := time.Since(start)
			if code != tc.code {
				t.Fatalf("exit %d, want %d: %s", code, tc.code, errb.String())
			}
			if tc.code != exitOK {
				if took > 5*time.Second {
					t.Fatalf("refused after %v, want under 5 s", took)
				}
				line := errb.String()
				if strings.Count(line, "\n") != 1 {
					t.Fatalf("want one stderr line, got %q", line)
				}
				for _, w := range tc.want {
					if !strings.Contains(line, w) {
						t.Fatalf("stderr %q does not mention %q", line, w)
					}
				}
				t.Logf("refused in %v: %s", took.Round(time.Millisecond), strings.TrimSpace(line))
				return
			}
			var sum struct {
				Status string `json:"status"`
				Pooled []struct {
					Covariate, Level string
					Levels, Units    int
				} `json:"pooled_levels"`
			}
			if err := json.Unmarshal(out.Bytes(), &sum); err != nil {
				t.Fatal(err)
			}
			got := fmt.Sprint(sum.Pooled)
			if sum.Status != "succeeded" || got != "[{grp (rare) 4995 10000}]" {
				t.Fatalf("status %s, pooled %s; want succeeded, [{grp (rare) 4995 10000}]", sum.Status, got)
			}
		})
	}
}
