package warehousetest

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"counterpart/warehouse"
)

// handEffects are two effect rows with undefined values (NaN), which the
// effects table must hold as NULL; seed tells runs apart.
func handEffects(seed float64) []warehouse.EffectRecord {
	nan := math.NaN()
	return []warehouse.EffectRecord{
		{Outcome: "y", Adjustment: "matched", Estimand: "ATT", Contrast: "difference", Method: "pair bootstrap",
			Estimate: 0.25 + seed, StdError: 0.5, CILow: -0.75, CIHigh: 1.25, PValue: 0.62,
			NTreated: 2, NControl: 3, NMissing: 1, EValue: 1.9, EValueCI: 1, RosenbaumGamma: nan},
		{Outcome: "y", Adjustment: "att", Estimand: "ATT", Contrast: "risk_ratio", Method: "sandwich",
			Estimate: 1.5, StdError: nan, CILow: nan, CIHigh: nan, PValue: nan,
			NTreated: 2, NControl: 4, NMissing: 1, EValue: nan, EValueCI: nan, RosenbaumGamma: 1.75},
	}
}

// testAbandon: StartRun marks a run of the same study left running (its
// process died) abandoned, with no finish time (when it stopped is
// unknown), in the transaction of the new runs row; a run
// of another study sharing the prefix, and finished runs, are untouched.
func testAbandon(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	run(t, w, out, publication(c, "r0", warehouse.StatusSucceeded, 0, handSchemes), t0)
	start := func(id, study string, at time.Time) {
		t.Helper()
		if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: id, Study: study, StartedAt: at}); err != nil {
			t.Fatalf("start %s: %v", id, err)
		}
	}
	start("r1", "st", t0.Add(time.Hour))                // killed: never published nor failed
	start("x1", "other", t0.Add(time.Hour+time.Minute)) // another study with the same prefix
	start("r2", "st", t0.Add(2*time.Hour))
	got := fmt.Sprint(e.Query(t, w, "SELECT run_id, status, finished_at IS NOT NULL FROM st_runs ORDER BY run_id"))
	if want := "[[r0 succeeded true] [r1 abandoned false] [r2 running false] [x1 running false]]"; got != want {
		t.Errorf("runs after a second StartRun\n got %s\nwant %s", got, want)
	}
	msg := fmt.Sprint(e.Query(t, w, "SELECT message FROM st_runs WHERE run_id = 'r1'"))
	if !strings.Contains(msg, "abandoned") || !strings.Contains(msg, "r2") {
		t.Errorf("abandoned run's message %s does not say which run found it", msg)
	}
	// An abandoned run is final: FailRun and Publish refuse it.
	if err := w.FailRun(ctx, out, "r1", "late"); err == nil {
		t.Error("FailRun on an abandoned run succeeded")
	}
	// A refused StartRun (duplicate id) abandons nothing: it is one
	// transaction.
	if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r0", Study: "st", StartedAt: t0.Add(3 * time.Hour)}); err == nil {
		t.Fatal("StartRun with an existing run id succeeded")
	}
	if s := status(t, e, w, "r2"); s != warehouse.StatusRunning {
		t.Errorf("a refused StartRun changed r2 to %s", s)
	}
}

// testEffects: effect rows are written in the publish transaction with
// NaN as NULL, the current view shows the latest succeeded run's, and the
// summary JSON lands in the runs row.
func testEffects(t *testing.T, e Engine) {
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	run(t, w, out, publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes), t0)
	run(t, w, out, publication(c, "r2", warehouse.StatusRejected, 1, handSchemes), t0.Add(time.Hour))
	got := fmt.Sprint(e.Query(t, w, `SELECT run_id, outcome, adjustment, estimand, contrast, method, estimate, std_error,
		ci_low, ci_high, p_value, n_treated, n_control, n_missing, e_value, e_value_ci, rosenbaum_gamma
		FROM st_effects ORDER BY run_id, contrast`))
	want := "[[r1 y matched ATT difference pair bootstrap 0.25 0.5 -0.75 1.25 0.62 2 3 1 1.9 1 <nil>]" +
		" [r1 y att ATT risk_ratio sandwich 1.5 <nil> <nil> <nil> <nil> 2 4 1 <nil> <nil> 1.75]" +
		" [r2 y matched ATT difference pair bootstrap 1.25 0.5 -0.75 1.25 0.62 2 3 1 1.9 1 <nil>]" +
		" [r2 y att ATT risk_ratio sandwich 1.5 <nil> <nil> <nil> <nil> 2 4 1 <nil> <nil> 1.75]]"
	if got != want {
		t.Errorf("effects\n got %s\nwant %s", got, want)
	}
	if got := runIDs(t, e, w, "st_current_effects"); got != "r1" {
		t.Errorf("current effects show %q, want r1 (r2 was rejected)", got)
	}
}

// sameJSON compares two JSON texts by value: Postgres jsonb re-spaces them.
func sameJSON(t *testing.T, got, want string) bool {
	t.Helper()
	if got == "" || want == "" {
		return got == want
	}
	var g, w any
	if err := json.Unmarshal([]byte(got), &g); err != nil {
		t.Errorf("stored JSON %q: %v", got, err)
		return false
	}
	if err := json.Unmarshal([]byte(want), &w); err != nil {
		t.Fatalf("test JSON %q: %v", want, err)
	}
	return reflect.DeepEqual(g, w)
}

// testRunQueries: Runs, Run and LatestSucceeded return what StartRun and
// Publish wrote, newest first, with every column.
func testRunQueries(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	if runs, err := w.Runs(ctx, out, 0); err != nil || len(runs) != 0 {
		t.Fatalf("runs before any run: %v %v", runs, err)
	}
	if _, ok, err := w.LatestSucceeded(ctx, out); err != nil || ok {
		t.Fatalf("latest succeeded before any run: %v %v", ok, err)
	}
	pubs := []*warehouse.Publication{
		publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes),
		publication(c, "r2", warehouse.StatusSucceeded, 1, handSchemes),
		publication(c, "r3", warehouse.StatusRejected, 2, handSchemes),
	}
	for i, p := range pubs {
		p.Run.ToolVersion, p.Run.SpecSHA256, p.Run.SpecJSON = "v0."+strconv.Itoa(i), "sha"+strconv.Itoa(i), `{"study": "st", "i": `+strconv.Itoa(i)+`}`
		p.Run.CohortSQL, p.Run.DBUser = "SELECT "+strconv.Itoa(i), "ann"
		p.Run.ModelJSON, p.Run.BalanceJSON, p.Run.EffectsJSON = `{"kind": "logit"}`, `{"pass": true}`, `[1, 2]`
		run(t, w, out, p, t0.Add(time.Duration(i)*time.Hour))
	}
	if err := w.StartRun(ctx, out, warehouse.RunRecord{RunID: "r4", Study: "st", StartedAt: t0.Add(3 * time.Hour)}); err != nil {
		t.Fatal(err)
	}

	runs, err := w.Runs(ctx, out, 0)
	if err != nil {
		t.Fatal(err)
	}
	var ids []string
	for _, r := range runs {
		ids = append(ids, r.RunID+":"+r.Status)
	}
	if got := strings.Join(ids, ","); got != "r4:running,r3:rejected,r2:succeeded,r1:succeeded" {
		t.Errorf("runs newest first: %s", got)
	}
	if runs, err := w.Runs(ctx, out, 2); err != nil || len(runs) != 2 || runs[1].RunID != "r3" {
		t.Errorf("runs limit 2: %d runs, %v", len(runs), err)
	}
	if !runs[0].FinishedAt.IsZero() || runs[0].SummaryJSON != "" {
		t.Errorf("running run: finished %v summary %q", runs[0].FinishedAt, runs[0].SummaryJSON)
	}

	r2, err := w.Run(ctx, out, "r2")
	if err != nil {
		t.Fatal(err)
	}
	p := pubs[1].Run
	if r2.Study != "st" || r2.Status != warehouse.StatusSucceeded || !r2.StartedAt.Equal(p.StartedAt) || !r2.FinishedAt.Equal(p.FinishedAt) ||
		r2.ToolVersion != p.ToolVersion || r2.SpecSHA256 != p.SpecSHA256 || r2.CohortSQL != p.CohortSQL ||
		r2.Engine != w.Engine() || r2.DBUser != "ann" || r2.Message != p.Message || r2.CohortFingerprint != "" {
		t.Errorf("run r2 = %+v", r2)
	}
	for _, f := range []struct{ name, got, want string }{
		{"spec", r2.SpecJSON, p.SpecJSON}, {"counts", r2.CountsJSON, p.CountsJSON}, {"model", r2.ModelJSON, p.ModelJSON},
		{"balance", r2.BalanceJSON, p.BalanceJSON}, {"effects", r2.EffectsJSON, p.EffectsJSON}, {"summary", r2.SummaryJSON, p.SummaryJSON},
	} {
		if !sameJSON(t, f.got, f.want) {
			t.Errorf("run r2 %s = %q, want %q", f.name, f.got, f.want)
		}
	}
	_, err = w.Run(ctx, out, "no-such-run")
	CheckBadInput(t, err, `"no-such-run"`, "st_runs")

	latest, ok, err := w.LatestSucceeded(ctx, out)
	if err != nil || !ok || latest.RunID != "r2" {
		t.Errorf("latest succeeded = %s %v %v, want r2", latest.RunID, ok, err)
	}
}

// testAnalysis: the analysis view has one row per unit of the current run
// with its scores, matching summary and scheme weights; the matching
// weights are those worked out by hand beside handMatches, and a weighted
// mean over the view agrees with the balance view's "matched" mean.
func testAnalysis(t *testing.T, e Engine) {
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	p1 := publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes)
	run(t, w, out, p1, t0)
	run(t, w, out, publication(c, "r2", warehouse.StatusRejected, 1, handSchemes), t0.Add(time.Hour))
	rows := e.Query(t, w, `SELECT run_id, id, coached, age, sex, y, ps, in_support, set_id, set_count, matched_weight, att, solo
		FROM st_analysis ORDER BY id`)
	want := []string{
		"r1 1 true 60 F 1 true 1 1 1 1 1",
		"r1 2 true 70 M 0 true 2 1 1 1 1",
		"r1 3 true 80 F <nil> true 3 1 1 1 1",
		"r1 4 false 50 M 1 true 2 1 0.5 0.5 0",
		"r1 5 false 60 M 0 true 1 1 1 2 1",
		"r1 6 false 70 F 0 true 2 2 1.5 1 0",
		"r1 7 false 40 M 1 false <nil> 0 0 0 0",
	}
	if len(rows) != len(want) {
		t.Fatalf("analysis view has %d rows, want %d", len(rows), len(want))
	}
	for i, r := range rows {
		got := strings.TrimSpace(fmt.Sprintln(append(r[:6:6], r[7:]...)...))
		if got != want[i] {
			t.Errorf("analysis row %d\n got %s\nwant %s", i, got, want[i])
		}
		if num(r[6]) != p1.PS[i] {
			t.Errorf("analysis row %d ps %v, want %v", i, r[6], p1.PS[i])
		}
	}
	// (0.5·50 + 1·60 + 1.5·70) / 3 = 63⅓ by hand; the balance view gets it
	// from the matches table by another query.
	mean := e.Query(t, w, "SELECT SUM(matched_weight * age) / SUM(matched_weight) FROM st_analysis WHERE NOT coached")
	bal := e.Query(t, w, "SELECT mean_control FROM st_balance WHERE covariate = 'age' AND adjustment = 'matched'")
	if m := num(mean[0][0]); math.Abs(m-190.0/3) > 1e-12 || len(bal) != 1 || math.Abs(num(bal[0][0])-m) > 1e-12 {
		t.Errorf("matched control mean of age: analysis view %v, balance view %v, want 63.333", mean, bal)
	}
}

// testPriorSets: the matched sets come back with native ids, sorted by
// set, treated first.
func testPriorSets(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	run(t, w, out, publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes), t0)
	ps, err := w.PriorSets(ctx, out, "r1")
	if err != nil {
		t.Fatal(err)
	}
	// handMatches with cohort index i as id i+1, in set, treated, id order.
	want := warehouse.PriorSets{
		SetID:     []int64{1, 1, 2, 2, 2, 3, 3},
		IntIDs:    []int64{1, 5, 2, 4, 6, 3, 6},
		Treated:   []bool{true, false, true, false, false, true, false},
		Distance:  []float64{0, 0.1, 0, 0.3, 0.2, 0, 0.4},
		SetWeight: []float64{1, 1, 1, 0.5, 0.5, 1, 1},
	}
	if !reflect.DeepEqual(ps, want) {
		t.Errorf("prior sets\n got %+v\nwant %+v", ps, want)
	}
	_, err = w.PriorSets(ctx, out, "r9")
	CheckBadInput(t, err, `"r9"`)

	// Text ids stay text.
	tc := textCohort(c)
	tout := output(e, tc, handSchemes, 0)
	tout.Prefix, tout.Study = "tx_", "tx"
	tp := publication(tc, "t1", warehouse.StatusSucceeded, 0, handSchemes)
	tp.Run.Study = "tx"
	run(t, w, tout, tp, t0)
	tps, err := w.PriorSets(ctx, tout, "t1")
	if err != nil {
		t.Fatal(err)
	}
	if want := []string{"u1", "u5", "u2", "u4", "u6", "u3", "u6"}; !slices.Equal(tps.TextIDs, want) || tps.IntIDs != nil {
		t.Errorf("text prior sets %q %v, want %q", tps.TextIDs, tps.IntIDs, want)
	}
}

// textCohort is c with unit ids "u1", "u2", ... in a text column.
func textCohort(c *warehouse.Cohort) *warehouse.Cohort {
	tc := *c
	tc.IDKind, tc.IntIDs, tc.TextIDs = warehouse.IDText, nil, make([]string, c.N())
	for i, id := range c.IntIDs {
		tc.TextIDs[i] = "u" + strconv.FormatInt(id, 10)
	}
	return &tc
}

// matchRows builds MatchRows from sets written as {treated indices},
// {control indices} with unit weights; distances are 0.
func matchRows(sets ...[2][]int) warehouse.MatchRows {
	var m warehouse.MatchRows
	for s, set := range sets {
		for k, units := range set {
			for _, u := range units {
				m.SetID = append(m.SetID, int64(10*s+7))
				m.Unit = append(m.Unit, u)
				m.Treated = append(m.Treated, k == 0)
				m.SetWeight = append(m.SetWeight, 1)
				m.Distance = append(m.Distance, 0)
			}
		}
	}
	return m
}

// independentDiff counts kept/changed/new/dropped with a query written
// apart from diff_runs.sql: each treated unit's controls become one sorted
// text signature, and the two runs' signatures are compared in a full
// outer join.
func independentDiff(t *testing.T, e Engine, w warehouse.Warehouse, a, b string) warehouse.RunDiff {
	t.Helper()
	q := `WITH tr AS (SELECT run_id, set_id, id AS t FROM st_matches WHERE treated AND run_id IN ('` + a + `', '` + b + `')),
pairs AS (SELECT DISTINCT tr.run_id, tr.t, CAST(m.id AS VARCHAR(40)) AS c
          FROM tr LEFT JOIN st_matches m ON m.run_id = tr.run_id AND m.set_id = tr.set_id AND NOT m.treated),
sig AS (SELECT run_id, t, COALESCE(string_agg(c, ',' ORDER BY c), '') AS s FROM pairs GROUP BY run_id, t),
sa AS (SELECT t, s FROM sig WHERE run_id = '` + a + `'),
sb AS (SELECT t, s FROM sig WHERE run_id = '` + b + `'),
cls AS (SELECT CASE WHEN sa.t IS NULL THEN 'new' WHEN sb.t IS NULL THEN 'dropped'
                    WHEN sa.s = sb.s THEN 'kept' ELSE 'changed' END AS k
        FROM sa FULL OUTER JOIN sb ON sa.t = sb.t)
SELECT k, count(*) FROM cls GROUP BY k`
	d := warehouse.RunDiff{A: a, B: b}
	for _, r := range e.Query(t, w, q) {
		n := int64(num(r[1]))
		switch r[0] {
		case "kept":
			d.Kept = n
		case "changed":
			d.Changed = n
		case "new":
			d.New = n
		case "dropped":
			d.Dropped = n
		}
	}
	return d
}

// testDiffRuns: hand-built runs whose differences are known by
// construction, checked against DiffRuns and the independent query.
// Set ids differ between runs on purpose: only the units matter.
func testDiffRuns(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	// Indices: treated 0, 1, 2 (ids 1-3); controls 3, 4, 5, 6 (ids 4-7).
	runs := map[string]warehouse.MatchRows{
		// a: 1–{5}, 2–{4, 6}.
		"a": matchRows([2][]int{{0}, {4}}, [2][]int{{1}, {3, 5}}),
		// b: 1–{5} kept, 2–{6, 4} kept (other order, other set), 3–{7} new.
		"b": matchRows([2][]int{{2}, {6}}, [2][]int{{1}, {5, 3}}, [2][]int{{0}, {4}}),
		// c: 1 and 2 share a stratum with {4, 6}: 1 changed, 2 kept; 3
		// dropped.
		"c": matchRows([2][]int{{0, 1}, {3, 5}}),
		// d: no matched sets at all.
		"d": {},
	}
	for i, id := range []string{"a", "b", "c", "d"} {
		p := publication(c, id, warehouse.StatusSucceeded, float64(i), handSchemes)
		p.Matches = runs[id]
		run(t, w, out, p, t0.Add(time.Duration(i)*time.Hour))
	}
	tests := []struct {
		a, b                           string
		kept, changed, newSet, dropped int64
	}{
		{"a", "b", 2, 0, 1, 0},
		{"b", "a", 2, 0, 0, 1},
		{"b", "c", 1, 1, 0, 1},
		{"a", "c", 1, 1, 0, 0},
		{"c", "c", 2, 0, 0, 0},
		{"a", "d", 0, 0, 0, 2},
		{"d", "b", 0, 0, 3, 0},
	}
	for _, tt := range tests {
		got, err := w.DiffRuns(ctx, out, tt.a, tt.b)
		if err != nil {
			t.Fatal(err)
		}
		want := warehouse.RunDiff{A: tt.a, B: tt.b, Kept: tt.kept, Changed: tt.changed, New: tt.newSet, Dropped: tt.dropped}
		if got != want {
			t.Errorf("diff %s→%s = %+v, want %+v", tt.a, tt.b, got, want)
		}
		if ind := independentDiff(t, e, w, tt.a, tt.b); ind != want {
			t.Errorf("independent diff %s→%s = %+v, want %+v", tt.a, tt.b, ind, want)
		}
	}
	_, err := w.DiffRuns(ctx, out, "a", "zz")
	CheckBadInput(t, err, `"zz"`)
}

// testDiffRunsRandom: on random matchings of a larger cohort (pairs, 1:k,
// reused controls, strata with several treated units), DiffRuns agrees
// with the independent query and with a count in Go.
func testDiffRunsRandom(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	const n, nt = 300, 90
	c := &warehouse.Cohort{Unit: "id", IDKind: warehouse.IDInt, Treatment: "tr", IntIDs: make([]int64, n), Treated: make([]bool, n)}
	for i := range n {
		c.IntIDs[i] = int64(1000 + 7*i)
		c.Treated[i] = i < nt
	}
	out := output(e, c, nil, 0)
	rng := rand.New(rand.NewPCG(1, 2))
	// a: random sets over the first 80 treated; b: each set of a kept,
	// given another control, or dropped, plus sets for the last 10.
	var setsA, setsB [][2][]int
	for tr := 0; tr < nt-10; tr++ {
		if rng.IntN(10) == 0 {
			continue // unmatched
		}
		set := [2][]int{{tr}, nil}
		if rng.IntN(8) == 0 {
			tr++
			set[0] = append(set[0], tr) // a stratum with two treated
		}
		for range 1 + rng.IntN(3) {
			set[1] = append(set[1], nt+rng.IntN(40)) // few controls: reuse
		}
		setsA = append(setsA, set)
	}
	for _, set := range setsA {
		switch rng.IntN(4) {
		case 0: // dropped
		case 1:
			ch := [2][]int{set[0], append([]int{nt + 40 + rng.IntN(5)}, set[1][1:]...)}
			setsB = append(setsB, ch)
		default:
			setsB = append(setsB, [2][]int{set[0], slices.Clone(set[1])})
		}
	}
	for tr := nt - 10; tr < nt; tr++ {
		setsB = append(setsB, [2][]int{{tr}, {nt + rng.IntN(n-nt)}})
	}
	rng.Shuffle(len(setsB), func(i, j int) { setsB[i], setsB[j] = setsB[j], setsB[i] })
	mr := map[string]warehouse.MatchRows{"a": matchRows(setsA...), "b": matchRows(setsB...)}
	for i, id := range []string{"a", "b"} {
		p := &warehouse.Publication{Run: warehouse.RunRecord{RunID: id, Study: "st", Status: warehouse.StatusSucceeded},
			Cohort: c, PS: make([]float64, n), LogitPS: make([]float64, n), InSupport: make([]bool, n), Matches: mr[id]}
		run(t, w, out, p, t0.Add(time.Duration(i)*time.Hour))
	}
	// Go count: treated index → sorted distinct control indices.
	ctl := func(m warehouse.MatchRows) map[int]string {
		sets := map[int64][]int{}
		for i := range m.Len() {
			sets[m.SetID[i]] = append(sets[m.SetID[i]], i)
		}
		per := map[int]map[int]bool{}
		for _, rows := range sets {
			for _, i := range rows {
				if m.Treated[i] {
					if per[m.Unit[i]] == nil {
						per[m.Unit[i]] = map[int]bool{}
					}
					for _, j := range rows {
						if !m.Treated[j] {
							per[m.Unit[i]][m.Unit[j]] = true
						}
					}
				}
			}
		}
		sig := map[int]string{}
		for tr, cs := range per {
			var l []int
			for u := range cs {
				l = append(l, u)
			}
			slices.Sort(l)
			sig[tr] = fmt.Sprint(l)
		}
		return sig
	}
	sa, sb := ctl(mr["a"]), ctl(mr["b"])
	want := warehouse.RunDiff{A: "a", B: "b"}
	for tr, s := range sa {
		switch sbs, ok := sb[tr]; {
		case !ok:
			want.Dropped++
		case sbs == s:
			want.Kept++
		default:
			want.Changed++
		}
	}
	for tr := range sb {
		if _, ok := sa[tr]; !ok {
			want.New++
		}
	}
	if want.Kept == 0 || want.Changed == 0 || want.New == 0 || want.Dropped == 0 {
		t.Fatalf("random case does not exercise every class: %+v", want)
	}
	got, err := w.DiffRuns(ctx, out, "a", "b")
	if err != nil {
		t.Fatal(err)
	}
	if got != want {
		t.Errorf("diff = %+v, Go count %+v", got, want)
	}
	if ind := independentDiff(t, e, w, "a", "b"); ind != want {
		t.Errorf("independent query %+v, Go count %+v", ind, want)
	}
}

// testRowCounts: every contract table is counted, 0 before it exists.
func testRowCounts(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	counts, err := w.RowCounts(ctx, out)
	if err != nil {
		t.Fatal(err)
	}
	if got := fmt.Sprint(counts); got != "map[st_cohort:0 st_effects:0 st_matches:0 st_runs:0 st_scores:0 st_weights:0]" {
		t.Errorf("counts before any run: %s", got)
	}
	run(t, w, out, publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes), t0)
	run(t, w, out, publication(c, "r2", warehouse.StatusSucceeded, 1, handSchemes), t0.Add(time.Hour))
	counts, err = w.RowCounts(ctx, out)
	if err != nil {
		t.Fatal(err)
	}
	// Two runs of 7 units, 7 match rows (handMatches) and 2 effects each.
	if got := fmt.Sprint(counts); got != "map[st_cohort:14 st_effects:4 st_matches:14 st_runs:2 st_scores:14 st_weights:14]" {
		t.Errorf("counts after two runs: %s", got)
	}
}

// testSummaryColumnAdded: a runs table from before the summary column
// gains it at the next StartRun, and Runs reads such a table before that.
func testSummaryColumnAdded(t *testing.T, e Engine) {
	ctx := context.Background()
	w := e.Open(t)
	c := readHand(t, w)
	out := output(e, c, handSchemes, 0)
	run(t, w, out, publication(c, "r1", warehouse.StatusSucceeded, 0, handSchemes), t0)
	e.Exec(t, w, "DROP VIEW st_analysis")
	e.Exec(t, w, "ALTER TABLE st_runs DROP COLUMN summary")
	runs, err := w.Runs(ctx, out, 0)
	if err != nil || len(runs) != 1 || runs[0].SummaryJSON != "" {
		t.Fatalf("runs of a table without summary: %+v %v", runs, err)
	}
	p2 := publication(c, "r2", warehouse.StatusSucceeded, 1, handSchemes)
	run(t, w, out, p2, t0.Add(time.Hour))
	r2, err := w.Run(ctx, out, "r2")
	if err != nil {
		t.Fatal(err)
	}
	if !sameJSON(t, r2.SummaryJSON, p2.Run.SummaryJSON) {
		t.Errorf("summary after the column was added: %q", r2.SummaryJSON)
	}
	if got := fmt.Sprint(e.Query(t, w, "SELECT run_id, summary IS NULL FROM st_runs ORDER BY run_id")); got != "[[r1 true] [r2 false]]" {
		t.Errorf("summary nulls %s", got)
	}
	if got := runIDs(t, e, w, "st_analysis"); got != "r2" {
		t.Errorf("analysis view recreated shows %q", got)
	}
}
