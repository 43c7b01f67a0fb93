package study

import (
	"context"
	"fmt"
	"math"
	"runtime/debug"
	"sort"

	"counterpart/match/assign"
	"counterpart/match/balance"
	"counterpart/match/score"
	"counterpart/match/weights"
	"counterpart/warehouse"
)

// ScaleGoMemoryLimit is the Go runtime's soft memory limit during a
// warehouse-scale run (runtime/debug.SetMemoryLimit), when GOMEMLIMIT
// does not set one: the collector runs more often as the heap nears it,
// which keeps the run's resident memory near its live data. It is soft:
// a run that needs more gets more.
const ScaleGoMemoryLimit = 160 << 20

// runInWarehouse is Run for score.fit_in: warehouse. The covariate matrix
// never leaves the engine:
//
//   - fit: Describe, a seed fitted in memory on a ~100k-unit hash sample
//     of the cohort (warehouse.Sampler), then gradient aggregates from the
//     seed and one full Moments aggregate for the standard errors
//     (FitInWarehouse); support from LogitRange (SupportInWarehouse);
//   - match: MatchInput brings id, treatment, stratum, logit and support
//     flag per unit, and the existing greedy or optimal code matches in
//     memory on those slices;
//   - publish, one transaction: the runs row, the cohort snapshot copied
//     by the engine from cohort.sql, scores and weights (WriteScores),
//     the matches from memory; then, inside the same transaction, one
//     aggregate pass over the snapshot just written gives the balance (the
//     balance_history view's definitions), the effective sample sizes and
//     the weighted effects' sums (warehouse.RunSumsSQL), one more over the
//     matches the matched effect's per-set sums (inWarehouseEffect), and
//     they settle the run's status before the runs row is written.
//
// Memory: an in-process engine (DuckDB) caps its buffer pool
// (warehouse.ScaleTuner) and the Go runtime gets a soft limit
// (ScaleGoMemoryLimit), so the run's resident memory stays a fraction of
// the in-memory path's.
//
// The summary carries no cohort fingerprint (it would need every row);
// options needing per-unit data in the process are refused by the spec.
//
// Stages: design (Describe, the width check, the design SQL), fit (the
// seed and the aggregate passes), support (LogitRange), match (MatchInput
// and matching), estimate (the time-to-event and rate outcomes read per
// unit) and publish (the transaction's writes). Inside publish, the one
// aggregate pass over the rows just written is billed to balance — it
// gives the balance and the effects' sums together — and turning those
// sums into effects to estimate, each pausing publish (clock.part).
func runInWarehouse(ctx context.Context, s *Spec, wh warehouse.Warehouse, iw warehouse.InWarehouse, opt Options, sum *Summary, clk *clock) (*Summary, error) {
	if iw == nil {
		return sum, fmt.Errorf("score.fit_in: %w: engine %s does not run warehouse-scale mode; use fit_in: memory", warehouse.ErrBadInput, wh.Engine())
	}
	sp, ok := wh.(warehouse.ScalePublisher)
	if !ok && !opt.DryRun {
		return sum, fmt.Errorf("score.fit_in: %w: engine %s cannot publish in warehouse-scale mode; use fit_in: memory", warehouse.ErrBadInput, wh.Engine())
	}
	// An engine running in this process (DuckDB) caps its buffer pool:
	// otherwise it keeps the pages it scans and the run's resident memory
	// exceeds the in-memory path's, which this mode exists to avoid.
	if t, ok := wh.(warehouse.ScaleTuner); ok {
		if err := t.TuneForScale(ctx, 0); err != nil {
			return sum, fmt.Errorf("score.fit_in: %w", err)
		}
	}
	// The Go heap of this mode is a few slices per unit (MatchInput, the
	// matches rows); without a soft limit the collector lets it grow to
	// twice the live heap between cycles. Set one for the run unless the
	// user set GOMEMLIMIT.
	if prev := debug.SetMemoryLimit(-1); prev == math.MaxInt64 {
		debug.SetMemoryLimit(ScaleGoMemoryLimit)
		defer debug.SetMemoryLimit(prev)
	}
	// The snapshot holds every outcome-like column (the time-to-event and
	// rate columns too); the sums cover the plain outcomes.
	q := warehouse.CohortQuery{SQL: s.Cohort.SQL, Unit: s.Cohort.Unit, Treatment: s.Cohort.Treatment,
		Outcomes: s.Cohort.ReadColumns(), Covariates: s.Cohort.Covariates, Categorical: s.Cohort.Categorical,
		Partition: s.Cohort.PartitionColumn}

	model, err := score.ParseModel(s.Score.Model)
	if err != nil {
		return sum, badInput("fit score", err)
	}
	guard := func(desc *warehouse.Description) error { return checkWidth(s, describedLevels(desc), desc.N) }
	fit, d, err := fitInWarehouse(ctx, iw, q, score.Options{Model: model, Lambda: s.Score.Lambda, MaxIter: s.Score.MaxIter, OnPass: opt.Pass}, guard, clk)
	if err != nil {
		return sum, err
	}
	n, nt := fit.N, fit.NTreated
	sum.Counts = Counts{Units: n, Treated: nt, Control: n - nt}
	// Now that the cohort's size is known, give the engine room for the
	// publish step's joins (see warehouse.ScaleTuner).
	if t, ok := wh.(warehouse.ScaleTuner); ok {
		if err := t.TuneForScale(ctx, n); err != nil {
			return sum, fmt.Errorf("score.fit_in: %w", err)
		}
	}
	sum.Model = modelSummary(s.Score.Model, fit)
	endSupport := clk.begin("support")
	sup, err := SupportInWarehouse(ctx, iw, q, d, fit.Coef, s.Support)
	endSupport()
	if err != nil {
		return sum, err
	}

	mi, thin, rows, err := matchStage(ctx, s, iw, q, d, fit.Coef, sup, n, sum, clk)
	if err != nil {
		return sum, err
	}
	// Time-to-event and rate outcomes read their few columns per unit and
	// are estimated exactly as in memory; bad values stop the run here,
	// before anything is written.
	endEstimate := clk.begin("estimate")
	ev, err := eventsInWarehouse(ctx, s, iw, q, mi, rows)
	endEstimate()
	if err != nil {
		return sum, err
	}
	if opt.DryRun {
		sum.Status = "dry-run"
		return sum, nil
	}

	endPublish := clk.begin("publish")
	// Ended by the transaction's last statement (Seal); on an error, here.
	defer endPublish()
	out := warehouse.Output{Schema: s.Output.Schema, Prefix: s.Output.Prefix, Study: s.Study, KeepRuns: s.Output.KeepRuns, KeepFailedDays: s.Output.KeepFailedDays,
		Unit: q.Unit, IDKind: d.IDKind, Treatment: q.Treatment, Outcomes: q.Outcomes, Schemes: s.Schemes(),
		TimeToEvent: len(s.Cohort.TimeToEvent) > 0}
	for i, k := range d.CovKinds(q) {
		out.Covariates = append(out.Covariates, warehouse.CovariateMeta{Name: q.Covariates[i], Kind: k})
	}
	if _, err := warehouse.NewContract(out); err != nil {
		return sum, fmt.Errorf("publish: %w", err)
	}
	rec := newRunRecord(ctx, s, wh, opt, sum)
	if err := wh.StartRun(ctx, out, rec); err != nil {
		return sum, startFailed(ctx, wh, out, sum, err)
	}
	pub := &warehouse.Publication{Run: rec, Survival: ev.steps, Seal: sealRun(sum, endPublish)}
	if err := publishInWarehouse(ctx, sp, out, s, q, d, fit.Coef, sup, thin, rows, sum, pub, ev, clk); err != nil {
		return sum, failPublish(ctx, wh, out, sum, err)
	}
	return sum, finishRun(sum)
}

// matchStage reads the scores matching needs (MatchInput) and matches on
// them. The c-statistic and the support counts, computed from the same
// slices, are billed to fit and support.
func matchStage(ctx context.Context, s *Spec, iw warehouse.InWarehouse, q warehouse.CohortQuery, d *warehouse.DesignSQL, coef []float64,
	sup warehouse.Support, n int, sum *Summary, clk *clock) (*warehouse.MatchInput, *warehouse.Cohort, warehouse.MatchRows, error) {
	defer clk.begin("match")()
	var rows warehouse.MatchRows
	mi, err := iw.MatchInput(ctx, q, d, coef, sup, s.Matching.ExactOn)
	if err != nil {
		return nil, nil, rows, fmt.Errorf("match input: %w", err)
	}
	if len(mi.Treated) != n {
		return nil, nil, rows, fmt.Errorf("match input: %d rows, the fit saw %d: the data changed during the run", len(mi.Treated), n)
	}
	endFit := clk.part("fit")
	sum.Model.CStatistic = Num(score.CStatistic(mi.Logit, mi.Treated))
	endFit()
	endSupport := clk.part("support")
	keptT, err := recordSupport(sum, s.Support, logistic(sup.Low), logistic(sup.High), mi.Treated, mi.InSupport)
	endSupport()
	if err != nil {
		return nil, nil, rows, err
	}
	// thin is the cohort as matching and the matches rows need it: ids
	// and treatment only.
	thin := &warehouse.Cohort{Unit: q.Unit, IDKind: mi.IDKind, IntIDs: mi.IntIDs, TextIDs: mi.TextIDs, Treatment: q.Treatment, Treated: mi.Treated}
	if s.Matching.Algorithm != "off" {
		if rows, err = matchInWarehouse(s, thin, mi, keptT, sum, checker(ctx)); err != nil {
			return nil, nil, rows, err
		}
	}
	return mi, thin, rows, nil
}

// publishInWarehouse drives the publish transaction in order: matches,
// snapshot, scores and weights, the sums of the rows just written (which
// settle the balance, the effects and the run's status), the final runs
// row, commit. Any error rolls all of it back.
func publishInWarehouse(ctx context.Context, sp warehouse.ScalePublisher, out warehouse.Output, s *Spec, q warehouse.CohortQuery, d *warehouse.DesignSQL,
	coef []float64, sup warehouse.Support, thin *warehouse.Cohort, rows warehouse.MatchRows, sum *Summary, pub *warehouse.Publication, ev eventResults, clk *clock) error {
	tx, err := sp.BeginScale(ctx, out, sum.RunID)
	if err != nil {
		return err
	}
	defer tx.Rollback(ctx)
	if err := tx.WriteMatches(ctx, thin, rows); err != nil {
		return err
	}
	if err := tx.WriteSnapshot(ctx, q, d); err != nil {
		return err
	}
	if err := tx.WriteScores(ctx, q, d, coef, sup, s.Schemes()); err != nil {
		return err
	}
	endBalance := clk.part("balance")
	rs, err := tx.RunSums(ctx, warehouse.RunSums{
		Covariates: out.Covariates, Shifts: balanceShifts(d, out.Covariates), Matched: s.Matching.Algorithm != "off",
		Schemes: s.Schemes(), Design: d, Coef: coef, Support: sup, Outcomes: s.Cohort.Outcomes, Cohort: &q})
	if err != nil {
		return fmt.Errorf("balance: %w", err)
	}
	balanceInWarehouse(rs, s, sum)
	endBalance()
	endEstimate := clk.part("estimate")
	err = effectsInWarehouse(s, sum, rs)
	endEstimate()
	if err != nil {
		return fmt.Errorf("estimate: %w", err)
	}
	sum.Effects = append(sum.Effects, ev.effects...)
	sum.Survival = ev.curves
	settleRecord(&pub.Run, s, sum, clk.read())
	pub.Effects = effectRecords(sum.Effects)
	if err := tx.Finish(ctx, pub); err != nil {
		return fmt.Errorf("run %s: %w", sum.RunID, err)
	}
	if err := tx.Commit(ctx); err != nil {
		return err
	}
	// The runs row's finish time is the end of the publish transaction.
	sum.FinishedAt = pub.Run.FinishedAt
	return nil
}

func logistic(eta float64) float64 { return 1 / (1 + math.Exp(-eta)) }

// matchInWarehouse matches on MatchInput's slices with the in-memory
// greedy or optimal code and returns the matches rows.
func matchInWarehouse(s *Spec, thin *warehouse.Cohort, mi *warehouse.MatchInput, keptT int, sum *Summary, check func() error) (warehouse.MatchRows, error) {
	z := mi.Treated
	sd := pooledSD(mi.Logit, z)
	width := s.Matching.Caliper * sd
	var st []int32
	nstrata := 1
	if len(s.Matching.ExactOn) > 0 {
		st, nstrata = mi.Stratum, mi.Strata
	}
	ms := MatchingSummary{Algorithm: s.Matching.Algorithm, Controls: s.Matching.Controls, Reuse: s.Matching.Reuse,
		CaliperSD: Num(s.Matching.Caliper), LogitSD: Num(sd), CaliperWidth: Num(width), Strata: nstrata}
	var solver Solver
	sets, _, err := matchUnits(matchInput{spec: s, cohort: thin, logit: mi.Logit, eligible: mi.InSupport, strata: st, width: width, solver: &solver, check: check})
	if err != nil {
		return warehouse.MatchRows{}, badInput("match", err)
	}
	if s.Matching.Algorithm == "optimal" {
		ms.Solver = &solver
	}
	groups := assign.FromSets(sets)
	// RunSumsSQL reads one weight per unit: refuse a reused control.
	f, err := flattenGroups(groups, len(z), true)
	if err != nil {
		return f.rows, err
	}
	if err := recordMatching(sum, &ms, f, len(groups), keptT); err != nil {
		return f.rows, err
	}
	return f.rows, nil
}

// eventResults are the time-to-event and rate outcomes' rows of a
// warehouse-scale run, computed before publishing.
type eventResults struct {
	effects []EffectRow
	curves  []SurvivalCurve
	steps   []warehouse.SurvivalStep
}

// eventsInWarehouse estimates the time-to-event and rate outcomes with the
// in-memory estimators on their columns read per unit (UnitColumns), the
// matched sets of this run and each scheme's weights from the warehouse
// fit's scores (the formulas the engine's weights table holds).
func eventsInWarehouse(ctx context.Context, s *Spec, iw warehouse.InWarehouse, q warehouse.CohortQuery, mi *warehouse.MatchInput, rows warehouse.MatchRows) (eventResults, error) {
	if len(s.Cohort.TimeToEvent) == 0 && len(s.Cohort.Rates) == 0 {
		return eventResults{}, nil
	}
	qq := q
	qq.Outcomes = s.Cohort.ReadColumns()[len(s.Cohort.Outcomes):]
	vals, err := iw.UnitColumns(ctx, qq)
	if err != nil {
		return eventResults{}, err
	}
	z := mi.Treated
	if len(vals) > 0 && len(vals[0]) != len(z) {
		return eventResults{}, fmt.Errorf("read outcome columns: %d rows, matching read %d: the data changed during the run", len(vals[0]), len(z))
	}
	c := &warehouse.Cohort{Treated: z}
	for j, name := range qq.Outcomes {
		c.Outcomes = append(c.Outcomes, warehouse.Outcome{Name: name, Values: vals[j]})
	}
	adjs := []adjustment{{name: "unadjusted", estimand: "none"}}
	var mr *matchedRows
	if s.Matching.Algorithm != "off" {
		mr = &matchedRows{unit: rows.Unit, z: rows.Treated, w: rows.SetWeight, cluster: make([]int, len(rows.SetID))}
		for r, id := range rows.SetID {
			mr.cluster[r] = int(id)
		}
		adjs = append(adjs, adjustment{name: "matched", estimand: "att", matched: true})
	}
	ps := make([]float64, len(mi.Logit))
	for i, eta := range mi.Logit {
		ps[i] = logistic(eta)
	}
	for _, scheme := range s.Schemes() {
		fn, err := weights.ByName(scheme)
		if err != nil {
			return eventResults{}, badInput("weights", err)
		}
		adjs = append(adjs, adjustment{name: scheme, estimand: weights.Estimand(scheme), w: weights.Restrict(fn(ps, z), mi.InSupport)})
	}
	sum := &Summary{}
	steps, err := estimateEvents(s, c, adjs, mr, sum)
	if err != nil {
		return eventResults{}, err
	}
	if err := estimateRates(s, c, adjs, mr, sum); err != nil {
		return eventResults{}, err
	}
	return eventResults{effects: sum.Effects, curves: sum.Survival, steps: steps}, nil
}

// adjustmentNames lists the run's adjustments in the in-memory order.
func adjustmentNames(s *Spec) []string {
	names := []string{"unadjusted"}
	if s.Matching.Algorithm != "off" {
		names = append(names, "matched")
	}
	return append(names, s.Schemes()...)
}

// balanceInWarehouse computes this run's balance statistics with the
// balance_history view's definitions from the one aggregate pass
// over the rows just written (balanceFromSums), judges them with
// balance.Judge as the in-memory path does, and sets the gate. ESS per
// arm: (Σw)²/Σw² from the same sums (the arm sizes unadjusted; the summed
// set weights for matched).
func balanceInWarehouse(rs *warehouse.Sums, s *Spec, sum *Summary) {
	adjs := adjustmentNames(s)
	byAdj := balanceFromSums(rs, adjs)
	pos := map[string]int{}
	for i, name := range s.Cohort.Covariates {
		pos[name] = i
	}
	ess := map[string][2]float64{}
	for a, name := range adjs {
		var e [2]float64 // treated, comparison
		for g := range 2 {
			if b := rs.Balance[a][g]; b.W2 > 0 {
				e[1-g] = b.W * b.W / b.W2
			}
		}
		ess[name] = e
	}
	for _, adj := range adjustmentNames(s) {
		st := byAdj[adj]
		sort.SliceStable(st, func(a, b int) bool {
			if st[a].Name != st[b].Name {
				return pos[st[a].Name] < pos[st[b].Name]
			}
			return levelLess(st[a].Level, st[b].Level)
		})
		v := balance.Judge(st, limits(s))
		sum.Balance = append(sum.Balance, AdjustmentBalance{Adjustment: adj, Pass: v.Pass, WorstSMD: Num(v.WorstSMD),
			WorstVariable: v.WorstVariable, Failures: v.Failures, Stats: toStats(st),
			ESSTreated: Num(ess[adj][0]), ESSControl: Num(ess[adj][1])})
	}
	judgeGate(s, sum)
}

// levelLess orders two levels as warehouse.SortLevels does.
func levelLess(a, b string) bool {
	l := []string{a, b}
	warehouse.SortLevels(l, []int{0, 1})
	return l[0] == a && a != b
}
