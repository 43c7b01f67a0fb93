package shardtest

import (
	"context"
	"fmt"
	"regexp"
	"strings"
	"testing"

	"github.com/jackc/pgx/v5"

	"counterpart/warehouse"
)

// explain returns the EXPLAIN (VERBOSE) lines of query on the
// coordinator, in a session with partitionwise aggregation on (the
// database default New sets, repeated so the test says what it relies
// on).
func explain(t *testing.T, dsn, query string, args []any) []string {
	t.Helper()
	ctx := context.Background()
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		t.Fatalf("connect coordinator: %v", err)
	}
	defer conn.Close(ctx)
	if _, err := conn.Exec(ctx, "SET enable_partitionwise_aggregate = on"); err != nil {
		t.Fatal(err)
	}
	rows, err := conn.Query(ctx, "EXPLAIN (VERBOSE) "+query, args...)
	if err != nil {
		t.Fatalf("explain: %v\n%s", err, query)
	}
	var plan []string
	for rows.Next() {
		var line string
		if err := rows.Scan(&line); err != nil {
			t.Fatal(err)
		}
		plan = append(plan, line)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	return plan
}

// foreignScan is one Foreign Scan node of a plan: its header line and
// its detail lines (Output, Relations, Remote SQL).
type foreignScan struct {
	header    string
	relations string
	remote    string
}

// foreignScans cuts a plan's Foreign Scan (and Async Foreign Scan) nodes
// out of EXPLAIN's text: a node starts at the first line or at an arrow
// ("->") and owns the detail lines below it up to the next node.
func foreignScans(plan []string) []foreignScan {
	var out []foreignScan
	var cur *foreignScan
	for i, line := range plan {
		s := strings.TrimSpace(line)
		if i == 0 || strings.HasPrefix(s, "->") {
			cur = nil
			if strings.Contains(s, "Foreign Scan") {
				out = append(out, foreignScan{header: s})
				cur = &out[len(out)-1]
			}
			continue
		}
		if cur == nil {
			continue
		}
		switch {
		case strings.HasPrefix(s, "Relations:"):
			cur.relations = s
		case strings.HasPrefix(s, "Remote SQL:"):
			cur.remote = s
		}
	}
	return out
}

var partitionRel = regexp.MustCompile(`hf_members_p(\d+)`)

// pushdownProblems says what keeps plan from being fully pushed down:
// every shard's partition must be scanned exactly once, by a Foreign
// Scan whose relation is an aggregate of that partition (Relations:
// Aggregate on …) and whose Remote SQL sums and groups (the shard
// computes its own sums); any other foreign scan of the cohort is a
// row-level scan, rows crossing the network.
func pushdownProblems(plan []string) []string {
	var problems []string
	seen := map[string]int{}
	for _, fs := range foreignScans(plan) {
		m := partitionRel.FindStringSubmatch(fs.relations + " " + fs.header)
		switch {
		case m == nil:
			problems = append(problems, "a foreign scan of no cohort partition: "+fs.header)
			continue
		case !strings.HasPrefix(fs.relations, "Relations: Aggregate on ("):
			problems = append(problems, fmt.Sprintf("partition %s is scanned row by row (%s)", m[1], fs.header))
		case !strings.Contains(fs.remote, "sum(") || !strings.Contains(fs.remote, "GROUP BY"):
			problems = append(problems, fmt.Sprintf("partition %s's Remote SQL neither sums nor groups: %.200s", m[1], fs.remote))
		}
		seen[m[1]]++
	}
	for i := range ShardPorts {
		if n := seen[fmt.Sprint(i)]; n != 1 {
			problems = append(problems, fmt.Sprintf("partition %d has %d foreign scans, want 1", i, n))
		}
	}
	return problems
}

// TestAggregatesPushedDown: on the sharded coordinator, with
// enable_partitionwise_aggregate on, each warehouse-scale aggregate pass
// the tool runs — the fit's information and gradient pass, the
// gradient-only pass, and the run's balance and effect sums — is one
// aggregate per shard computed on the shard (postgres_fdw's "Relations:
// Aggregate on", Remote SQL with sum and GROUP BY; plan node names from
// the PostgreSQL 15 manual, postgres_fdw and "Partitionwise Aggregate")
// and no row-level foreign scan of the cohort is left. The SQL is the
// engine's: built by the exported builders the engine calls, from the
// design the engine's own Describe makes. As a control, the same pass
// without the partition column is flagged as not pushed down, so the
// checker can fail.
func TestAggregatesPushedDown(t *testing.T) {
	c := New(t, 2000, 5)
	ctx := context.Background()
	_, iw := openScale(t, c.DSN)
	q := cohortQuery(Sharded)
	desc, err := iw.Describe(ctx, q)
	if err != nil {
		t.Fatalf("describe: %v", err)
	}
	d, err := warehouse.NewDesignSQL(desc)
	if err != nil {
		t.Fatalf("design: %v", err)
	}
	beta := make([]float64, len(d.Columns)+1)
	plain := q
	plain.Partition = ""
	// The Postgres dialect asks for lateral per-row levels (its Inlines,
	// which the engine passes: true); with a partition column the
	// builders choose nested derived tables themselves.
	info, infoArgs := warehouse.MomentsSQL(q, d, beta, true, true)
	grad, gradArgs := warehouse.MomentsSQL(q, d, beta, true, false)
	ct, spec := runSumsSpec(t, desc, d, q, beta)
	sums, sumsArgs, err := warehouse.RunSumsSQL(ct, spec, true)
	if err != nil {
		t.Fatalf("run sums: %v", err)
	}
	ctrl, ctrlArgs := warehouse.MomentsSQL(plain, d, beta, true, true)
	_, ctrlSpec := runSumsSpec(t, desc, d, plain, beta)
	ctrlSums, ctrlSumsArgs, err := warehouse.RunSumsSQL(ct, ctrlSpec, true)
	if err != nil {
		t.Fatalf("run sums: %v", err)
	}
	for _, tc := range []struct {
		name   string
		sql    string
		args   []any
		pushed bool
	}{
		{"moments pass", info, infoArgs, true},
		{"gradient pass", grad, gradArgs, true},
		{"run sums", sums, sumsArgs, true},
		{"control: moments pass without the partition column", ctrl, ctrlArgs, false},
		{"control: run sums without the partition column", ctrlSums, ctrlSumsArgs, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			plan := explain(t, c.DSN, tc.sql, tc.args)
			problems := pushdownProblems(plan)
			if tc.pushed && len(problems) > 0 {
				t.Errorf("not pushed down to the shards:\n  %s\nplan:\n%s", strings.Join(problems, "\n  "), clip(plan))
			}
			if !tc.pushed && len(problems) == 0 {
				t.Errorf("the control passed the pushdown check:\n%s", clip(plan))
			}
		})
	}
}

// clip is a plan for an error message, each line cut to 160 characters:
// the function calls of a pass run to kilobytes.
func clip(plan []string) string {
	out := make([]string, len(plan))
	for i, l := range plan {
		if len(l) > 160 {
			l = l[:160] + " …"
		}
		out[i] = l
	}
	return strings.Join(out, "\n")
}
