package shardtest

import (
	"context"
	"math"
	"strings"
	"testing"

	"counterpart/warehouse"
)

// cohortQuery is the demo study's cohort over table, as the study
// package hands it to the engine, with the partition column selected
// and named.
func cohortQuery(table string) warehouse.CohortQuery {
	return warehouse.CohortQuery{
		SQL: "select member_id, coached, age, sex, region, prior_admits, charlson, lives_alone, ef_reduced, " +
			"readmit_30d, cost_90d, " + PartitionColumn + " from " + table,
		Unit: "member_id", Treatment: "coached", Outcomes: []string{"readmit_30d", "cost_90d"},
		Covariates: []string{"age", "sex", "region", "prior_admits", "charlson", "lives_alone", "ef_reduced"},
		Partition:  PartitionColumn,
	}
}

// runSumsSpec is the run's balance and effect pass of a weighting study
// over the cohort query q, as warehouse-scale publishing asks for it
// with a partition column (match/study's RunSums with Cohort set; the
// matched sums join the run's sets on the coordinator and are not part
// of it): the design's covariates with the engine's levels, the cohort
// means as shifts, three weighting schemes at coefficients coef.
func runSumsSpec(t *testing.T, desc *warehouse.Description, d *warehouse.DesignSQL, q warehouse.CohortQuery, coef []float64) (*warehouse.Contract, warehouse.RunSums) {
	t.Helper()
	schemes := []string{"att", "ate", "overlap"}
	r := warehouse.RunSums{Schemes: schemes, Design: d, Coef: coef, Outcomes: q.Outcomes,
		Support: warehouse.Support{Low: math.Inf(-1), High: math.Inf(1)}, Cohort: &q, OutcomeBool: make([]bool, len(q.Outcomes))}
	for _, cd := range desc.Columns {
		r.Covariates = append(r.Covariates, warehouse.CovariateMeta{Name: cd.Name, Kind: cd.Kind})
		r.Levels = append(r.Levels, cd.Levels)
		if cd.Kind == warehouse.Numeric {
			r.Shifts = append(r.Shifts, cd.Mean)
		}
	}
	c, err := warehouse.NewContract(warehouse.Output{Schema: "public", Prefix: "bytes_", Study: "bytes", Unit: q.Unit, IDKind: warehouse.IDInt,
		Treatment: q.Treatment, Outcomes: q.Outcomes, Schemes: schemes, Covariates: r.Covariates})
	if err != nil {
		t.Fatalf("contract: %v", err)
	}
	return c, r
}

// openScale opens the tool's own Postgres engine on the coordinator and
// returns its warehouse-scale interface: the passes measured below are
// the SQL the tool runs, through the code that runs it.
func openScale(t *testing.T, dsn string) (warehouse.Warehouse, warehouse.InWarehouse) {
	t.Helper()
	wh, err := warehouse.Open(context.Background(), "postgres", dsn, warehouse.OpenOptions{})
	if err != nil {
		t.Fatalf("open coordinator: %v", err)
	}
	t.Cleanup(func() { wh.Close() })
	iw, ok := wh.(warehouse.InWarehouse)
	if !ok {
		t.Fatal("the postgres engine has no warehouse-scale mode")
	}
	return wh, iw
}

// TestShardBytes measures what crosses the network between the
// coordinator and the shards (both proxies together) for one pass of the
// warehouse-scale fit — the information and gradient pass, and the
// gradient-only pass — and, for contrast, for the in-memory read of the
// same cohort. With the aggregates pushed down each pass moves a few
// kilobytes whatever the number of rows (the query text out, one row of
// sums per partition back); the in-memory read moves every row. The
// figures are logged (go test -run TestShardBytes -v) for the README.
// The passes must also give the single-node table's sums.
func TestShardBytes(t *testing.T) {
	const n = 20000
	c := New(t, n, 7)
	ctx := context.Background()
	wh, iw := openScale(t, c.DSN)
	_, single := openScale(t, c.DSN)
	q, qs := cohortQuery(Sharded), cohortQuery(Single)
	desc, err := iw.Describe(ctx, q)
	if err != nil {
		t.Fatalf("describe: %v", err)
	}
	d, err := warehouse.NewDesignSQL(desc)
	if err != nil {
		t.Fatalf("design: %v", err)
	}
	beta := make([]float64, len(d.Columns)+1)
	for j := range beta {
		beta[j] = 0.05 * float64(j%3-1) // off zero, so every term counts
	}
	// The engine's session keeps its shard connections: one warm-up pass
	// pays for their start-up, so each figure below is one pass alone.
	if _, err := iw.Moments(ctx, q, d, beta, false); err != nil {
		t.Fatalf("warm-up pass: %v", err)
	}
	// sent[what] holds, per shard, the cursor queries the pass made the
	// shard run: postgres_fdw opens a cursor (DECLARE … CURSOR FOR) per
	// remote scan.
	sent := map[string][][]string{}
	measure := func(what string, f func() error) Counts {
		t.Helper()
		before, q0 := c.Counts(), c.Queries()
		if err := f(); err != nil {
			t.Fatalf("%s: %v", what, err)
		}
		moved := c.Counts().Sub(before)
		for i, qs := range c.Queries() {
			var scans []string
			for _, s := range qs[len(q0[i]):] {
				if strings.Contains(s, "DECLARE") {
					scans = append(scans, s)
				}
			}
			sent[what] = append(sent[what], scans)
		}
		return moved
	}
	var got, want *warehouse.Moments
	info := measure("moments pass", func() (err error) { got, err = iw.Moments(ctx, q, d, beta, true); return })
	grad := measure("gradient pass", func() (err error) { _, err = iw.Moments(ctx, q, d, beta, false); return })
	descr := measure("describe", func() error { _, err := iw.Describe(ctx, q); return err })
	coef := make([]float64, len(beta)) // any coefficients: only the bytes are looked at
	coef[0] = -0.5
	lr := measure("logit range", func() error { _, err := iw.LogitRange(ctx, q, d, coef); return err })
	read := measure("in-memory read", func() error { _, err := wh.ReadCohort(ctx, q); return err })
	if want, err = single.Moments(ctx, qs, d, beta, true); err != nil {
		t.Fatalf("single-node moments: %v", err)
	}
	if got.N != want.N || got.NTreated != want.NTreated || got.Perfect != want.Perfect || !near(got.LogLik, want.LogLik, 1e-10) {
		t.Errorf("sharded moments n %d treated %d loglik %v, single-node %d %d %v", got.N, got.NTreated, got.LogLik, want.N, want.NTreated, want.LogLik)
	}
	for _, p := range [][2][]float64{{got.Grad, want.Grad}, {got.Info, want.Info}} {
		if len(p[0]) != len(p[1]) || len(p[0]) == 0 {
			t.Fatalf("sharded sums %d long, single-node %d", len(p[0]), len(p[1]))
		}
		for i := range p[0] {
			if !near(p[0][i], p[1][i], 1e-10) {
				t.Errorf("sum %d: sharded %v, single-node %v", i, p[0][i], p[1][i])
			}
		}
	}

	t.Logf("%d units on %d shards (%v rows), %d design columns", n, len(ShardPorts), c.Rows, len(d.Columns))
	t.Logf("bytes per moments pass (information + gradient): %v", info)
	t.Logf("bytes per gradient pass: %v", grad)
	t.Logf("bytes of the describe step (summaries and levels): %v", descr)
	t.Logf("bytes of the logit-range pass (minmax support): %v", lr)
	t.Logf("bytes of the in-memory read of the cohort: %v", read)
	// Pushed down, a pass brings back no rows, only each partition's
	// sums: well under a fiftieth of what the read brings back (at 20,000
	// units the read is megabytes, a pass's answer kilobytes). What goes
	// to the shards is the pass's SQL text, whose size depends on the
	// design's width, never on the number of units.
	for _, m := range []struct {
		what string
		c    Counts
	}{{"moments pass", info}, {"gradient pass", grad}, {"logit range", lr}} {
		if m.c.FromShard == 0 || m.c.FromShard*50 > read.FromShard {
			t.Errorf("%s moved %v, the in-memory read %v: the aggregate was not pushed down to the shards", m.what, m.c, read)
		}
	}
	// What the engine's passes really asked of the shards: per shard, one
	// remote query, an aggregate grouped by the partition column.
	for _, what := range []string{"moments pass", "gradient pass"} {
		for i, scans := range sent[what] {
			if len(scans) != 1 || !strings.Contains(scans[0], "sum(") || !strings.Contains(scans[0], "GROUP BY") {
				t.Errorf("%s: shard %d ran %d remote queries, want one aggregate with GROUP BY; first: %.300q", what, i, len(scans), first(scans))
			}
		}
	}
	for i, scans := range sent["in-memory read"] {
		if len(scans) != 1 || strings.Contains(scans[0], "GROUP BY") {
			t.Errorf("in-memory read: shard %d ran %d remote queries, want one row scan; first: %.300q", i, len(scans), first(scans))
		}
	}
	if grad.Total() >= info.Total() {
		t.Errorf("gradient pass moved %v, no less than the full pass's %v", grad, info)
	}
}

func first(s []string) string {
	if len(s) == 0 {
		return "(none)"
	}
	return s[0]
}
