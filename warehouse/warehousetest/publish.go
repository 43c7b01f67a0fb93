package warehousetest

import (
	"context"
	"fmt"
	"strings"
	"testing"

	"counterpart/warehouse"
)

// testPublishChecks: a publication that does not fit its output is refused
// before anything is written.
func testPublishChecks(t *testing.T, e Engine) {
	w := e.Open(t)
	ctx := context.Background()
	e.Exec(t, w, "CREATE TABLE src (id BIGINT, tr BOOLEAN, x DOUBLE PRECISION); INSERT INTO src VALUES (0, TRUE, 0), (1, FALSE, 1), (2, TRUE, 2), (3, FALSE, 3)")
	c, err := w.ReadCohort(ctx, warehouse.CohortQuery{SQL: "SELECT * FROM src ORDER BY id", Unit: "id", Treatment: "tr", Covariates: []string{"x"}})
	if err != nil {
		t.Fatal(err)
	}
	out := warehouse.Output{Schema: e.Schema, Prefix: "st_", Study: "st", Unit: "id", Treatment: "tr",
		Covariates: []warehouse.CovariateMeta{{Name: "x"}}, Schemes: []string{"att"}}
	good := func() *warehouse.Publication {
		return &warehouse.Publication{Run: warehouse.RunRecord{RunID: "r1", Status: warehouse.StatusSucceeded}, Cohort: c,
			PS: make([]float64, 4), LogitPS: make([]float64, 4), InSupport: make([]bool, 4), Weights: [][]float64{make([]float64, 4)}}
	}
	if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r1", Study: "st"}); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name string
		edit func(*warehouse.Publication)
		want string
	}{
		{"running status", func(p *warehouse.Publication) { p.Run.Status = warehouse.StatusRunning }, "final status"},
		{"short scores", func(p *warehouse.Publication) { p.PS = p.PS[:3] }, "ps has 3 values for 4 units"},
		{"weights columns", func(p *warehouse.Publication) { p.Weights = nil }, "0 columns for 1 schemes"},
		{"match unit", func(p *warehouse.Publication) {
			p.Matches = warehouse.MatchRows{SetID: []int64{1}, Unit: []int{9}, Treated: []bool{true}, SetWeight: []float64{1}, Distance: []float64{0}}
		}, "unit index 9 of 4"},
		{"rows without cohort", func(p *warehouse.Publication) { p.Cohort = nil }, "without their cohort"},
	}
	for _, tt := range tests {
		p := good()
		tt.edit(p)
		if err := w.Publish(ctx, out, p); err == nil || !strings.Contains(err.Error(), tt.want) {
			t.Errorf("%s: %v, want an error mentioning %q", tt.name, err, tt.want)
		}
	}
	if got := fmt.Sprint(e.Query(t, w, "SELECT status FROM st_runs")); got != "[[running]]" {
		t.Errorf("runs after refused publications: %s", got)
	}
	if err := w.Publish(ctx, out, good()); err != nil {
		t.Fatalf("the good publication: %v", err)
	}
}
