package study

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"time"

	"github.com/google/uuid"

	"counterpart/match/assign"
	"counterpart/match/balance"
	"counterpart/match/score"
	"counterpart/match/weights"
	"counterpart/warehouse"
)

// ErrRejected marks a run the balance gate rejected: exit 3.
var ErrRejected = errors.New("balance gate rejected the run")

// ErrUnchanged marks a run skipped because neither the cohort nor the
// study changed since the last succeeded run: exit 5.
var ErrUnchanged = errors.New("nothing changed since the last succeeded run")

// Options are the run's switches that are not part of the study file.
type Options struct {
	// DryRun validates, reads, fits and matches but writes nothing.
	DryRun bool
	// ToolVersion is recorded in the runs row.
	ToolVersion string
	// Now is the clock (tests pin it); nil means time.Now.
	Now func() time.Time
	// Stage, when set, is told as each stage starts (progress display).
	Stage func(name string)
	// StageDone, when set, is told as a stage (or a quiet part billed to
	// one) ends, with the stage's own seconds so far: what the summary's
	// stage_seconds holds, not the time since the previous stage began.
	// A stage with parts elsewhere (warehouse-scale fit and support) is
	// reported again after each; the last report holds its total.
	StageDone func(name string, seconds float64)
	// SkipUnchanged ends the run without writing anything when the cohort
	// fingerprint and the study file's hash both equal those of the last
	// succeeded run.
	SkipUnchanged bool
	// Diagnostics asks for the distribution summaries the HTML report
	// plots (score histograms, eCDFs); they cost a pass per covariate and
	// adjustment, so plain runs skip them.
	Diagnostics bool
	// Pass, when set, is told after each Newton (IRLS) pass of the
	// propensity fit: its number from 1 and the deviance. A wide or large
	// fit takes minutes, and this is the only sign of life it gives.
	Pass func(pass int, deviance float64)
}

// Run executes one study end to end against an already open warehouse.
// The returned Summary is filled as far as the run got, also on error.
func Run(ctx context.Context, s *Spec, wh warehouse.Warehouse, opt Options) (*Summary, error) {
	id, err := uuid.NewV7()
	if err != nil {
		return nil, fmt.Errorf("run id: %w", err)
	}
	sum := &Summary{
		Study: s.Study, RunID: id.String(), Engine: wh.Engine(), DryRun: opt.DryRun,
		Primary: s.Primary(), Estimand: s.Estimate.Estimand, Timings: map[string]float64{},
		ToolVersion: opt.ToolVersion, SpecSHA256: s.SHA256,
	}
	// The clock stamps StartedAt: the run's start is the origin of every
	// stage interval.
	clk := newClock(opt, sum)
	r := &run{s: s, wh: wh, opt: opt, sum: sum, clock: clk}
	r.out = warehouse.Output{Schema: s.Output.Schema, Prefix: s.Output.Prefix, Study: s.Study, KeepRuns: s.Output.KeepRuns, KeepFailedDays: s.Output.KeepFailedDays}
	if !opt.DryRun {
		unlock, err := wh.Lock(ctx, r.out)
		if err != nil {
			return sum, fmt.Errorf("lock: %w", err)
		}
		defer unlock()
	}
	if s.Score.FitIn == "warehouse" {
		iw, _ := wh.(warehouse.InWarehouse)
		return runInWarehouse(ctx, s, wh, iw, opt, sum, clk)
	}
	for _, step := range []func(context.Context) error{r.read, r.skipUnchanged, r.readPrior} {
		if err := step(ctx); err != nil {
			return sum, err
		}
	}
	res, err := analyse(ctx, s, r.cohort, sum, r.clock, opt, r.prior)
	if err != nil {
		return sum, err
	}
	if opt.DryRun {
		sum.Status = "dry-run"
		return sum, nil
	}
	return sum, r.publish(ctx, res)
}

// run is the in-memory pipeline's state between its stages.
type run struct {
	s   *Spec
	wh  warehouse.Warehouse
	opt Options
	sum *Summary
	*clock
	out    warehouse.Output
	cohort *warehouse.Cohort
	prior  *priorRun
}

// read reads the cohort and completes the output contract from it.
func (r *run) read(ctx context.Context) error {
	s := r.s
	defer r.begin("read")()
	c, err := r.wh.ReadCohort(ctx, warehouse.CohortQuery{
		SQL: s.Cohort.SQL, Unit: s.Cohort.Unit, Treatment: s.Cohort.Treatment,
		Outcomes: s.Cohort.ReadColumns(), Covariates: s.Cohort.Covariates, Categorical: s.Cohort.Categorical,
	})
	if err != nil {
		return fmt.Errorf("read cohort: %w", err)
	}
	r.sum.Pooled = poolRare(c, s.Cohort.RareLevels)
	r.cohort = c
	r.out.Unit, r.out.IDKind, r.out.Treatment = c.Unit, c.IDKind, c.Treatment
	for _, cov := range c.Covariates {
		r.out.Covariates = append(r.out.Covariates, warehouse.CovariateMeta{Name: cov.Name, Kind: cov.Kind})
	}
	for _, o := range c.Outcomes {
		r.out.Outcomes = append(r.out.Outcomes, o.Name)
	}
	r.out.Schemes = s.Schemes()
	r.out.TimeToEvent = len(s.Cohort.TimeToEvent) > 0
	return nil
}

// skipUnchanged ends the run (ErrUnchanged) when the cohort and the study
// equal those of the last succeeded run.
func (r *run) skipUnchanged(ctx context.Context) error {
	if !r.opt.SkipUnchanged {
		return nil
	}
	defer r.begin("skip-check")()
	last, ok, err := r.wh.LatestSucceeded(ctx, r.out)
	if err != nil {
		return fmt.Errorf("skip unchanged: %w", err)
	}
	if !ok || last.SpecSHA256 != r.s.SHA256 {
		return nil
	}
	// Kept in the summary, so the analysis does not hash again.
	endHash := r.part("fingerprint")
	r.sum.Fingerprint = fingerprint(r.cohort)
	endHash()
	if r.sum.Fingerprint != last.CohortFingerprint {
		return nil
	}
	r.sum.Status = warehouse.StatusSkipped
	r.sum.Message = "cohort and study unchanged since run " + last.RunID
	return fmt.Errorf("%w (run %s)", ErrUnchanged, last.RunID)
}

// readPrior loads the last succeeded run's matched sets when the study
// keeps prior matches.
func (r *run) readPrior(ctx context.Context) error {
	s := r.s
	if !s.Matching.KeepPrior || s.Matching.Algorithm == "off" || r.opt.DryRun {
		return nil
	}
	defer r.begin("prior")()
	last, ok, err := r.wh.LatestSucceeded(ctx, r.out)
	if err != nil || !ok {
		return wrapStep("keep prior", err)
	}
	ps, err := r.wh.PriorSets(ctx, r.out, last.RunID)
	if err != nil {
		return fmt.Errorf("keep prior: %w", err)
	}
	r.prior = &priorRun{runID: last.RunID, sets: ps}
	return nil
}

// publish writes the run: runs row first (status running), then every
// table in one transaction that settles the status.
func (r *run) publish(ctx context.Context, res *results) error {
	s, sum := r.s, r.sum
	endPublish := r.begin("publish")
	// Ended by Publish's last statement (Seal); on an error, here.
	defer endPublish()
	rec := newRunRecord(ctx, s, r.wh, r.opt, sum)
	if err := r.wh.StartRun(ctx, r.out, rec); err != nil {
		return startFailed(ctx, r.wh, r.out, sum, err)
	}
	settleRecord(&rec, s, sum, r.now())
	pub := &warehouse.Publication{
		Run: rec, Cohort: r.cohort, PS: res.ps, LogitPS: res.logit, InSupport: res.inSupport,
		Matches: res.matches, Weights: res.weights, Effects: effectRecords(sum.Effects), Survival: res.survival,
		Seal: sealRun(sum, endPublish),
	}
	if err := r.wh.Publish(ctx, r.out, pub); err != nil {
		return failPublish(ctx, r.wh, r.out, sum, err)
	}
	// The runs row's finish time is the end of the publish transaction.
	sum.FinishedAt = pub.Run.FinishedAt
	return finishRun(sum)
}

// wrapStep names a step in a non-nil error.
func wrapStep(step string, err error) error {
	if err == nil {
		return nil
	}
	return fmt.Errorf("%s: %w", step, err)
}

// results are the per-unit values publish writes.
type results struct {
	ps, logit []float64
	inSupport []bool
	matches   warehouse.MatchRows
	weights   [][]float64
	survival  []warehouse.SurvivalStep
}

// badInput classes a stage error as a problem with the data or the study
// (exit 2): the stages are pure, so their errors are never the database's
// — except a cancelled run's, which the stages pass on from their check
// and which stays a cancellation.
func badInput(step string, err error) error {
	if isCancel(err) {
		return fmt.Errorf("%s: %w", step, err)
	}
	return fmt.Errorf("%s: %w: %w", step, warehouse.ErrBadInput, err)
}

// isCancel reports whether err is the run's context ending.
func isCancel(err error) bool {
	return errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded)
}

// checker is the cancellation check the pure stages take (score.Options,
// assign.Options): the context's error, without the stages knowing it.
func checker(ctx context.Context) func() error {
	return func() error { return ctx.Err() }
}

// analysis is the statistical stages' shared state: the cohort, its
// design and score, and the summary they fill.
type analysis struct {
	ctx    context.Context
	opt    Options
	s      *Spec
	c      *warehouse.Cohort
	sum    *Summary
	clk    *clock
	prior  *priorRun
	d      *design
	fit    *score.Fit
	res    *results
	keptT  int
	prep   *balance.Prepared
	scoreP *balance.Prepared
	diag   []NamedWeights
	// pending are the adjustments whose balance the balance stage
	// records, in order.
	pending []NamedWeights
	// plain is the cohort with its plain outcomes only (estimate's).
	plain *warehouse.Cohort
	adjs  []adjustment
	mr    *matchedRows
}

// analyse runs every statistical stage on the cohort and fills the
// summary. ctx cancels it: between stages, and inside the long loops (the
// fit's passes, matching, the bootstrap) through their check functions.
func analyse(ctx context.Context, s *Spec, c *warehouse.Cohort, sum *Summary, clk *clock, opt Options, prior *priorRun) (*results, error) {
	a := &analysis{ctx: ctx, opt: opt, s: s, c: c, sum: sum, clk: clk, prior: prior}
	if err := a.design(); err != nil {
		return nil, err
	}
	// The fingerprint only needs the cohort: hash it while the model fits
	// (unless the skip-unchanged check already did). It runs beside the
	// stages, so it is timed apart from them (clock.overlap), never as
	// part of the fit.
	if sum.Fingerprint == "" {
		fp := make(chan string, 1)
		go func() {
			end := clk.overlap("fingerprint")
			f := fingerprint(c)
			end()
			fp <- f
		}()
		defer func() { sum.Fingerprint = <-fp }()
	}
	steps := []func() error{a.fitScore, a.support, a.match, a.weight, a.balance}
	if opt.Diagnostics {
		steps = append(steps, a.diagnose)
	}
	steps = append(steps, a.estimate)
	if s.Estimate.Bootstrap > 0 {
		steps = append(steps, a.bootstrap)
	}
	for _, step := range steps {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("analyse: %w", err)
		}
		if err := step(); err != nil {
			return nil, err
		}
	}
	return a.res, nil
}

// design checks the cohort (both arms, text numbers, the design's width)
// and builds the design matrix.
func (a *analysis) design() error {
	defer a.clk.begin("design")()
	if err := a.checkArms(); err != nil {
		return err
	}
	if err := checkWidth(a.s, cohortLevels(a.c), a.c.N()); err != nil {
		return err
	}
	d, err := buildDesign(a.c)
	if err != nil {
		return fmt.Errorf("design: %w", err)
	}
	a.d = d
	return nil
}

// checkArms counts the arms and refuses a cohort without both.
func (a *analysis) checkArms() error {
	n, z := a.c.N(), a.c.Treated
	nt := 0
	for _, t := range z {
		if t {
			nt++
		}
	}
	a.sum.Counts = Counts{Units: n, Treated: nt, Control: n - nt}
	if nt == 0 {
		return fmt.Errorf("read cohort: %w: column %s is false for every unit; the cohort needs treated units", warehouse.ErrBadInput, a.c.Treatment)
	}
	if nt == n {
		return fmt.Errorf("read cohort: %w: column %s is true for every unit; the cohort needs comparison (untreated) units", warehouse.ErrBadInput, a.c.Treatment)
	}
	return checkTextNumbers(a.s, a.c, a.sum)
}

// fitScore fits the propensity score on the design.
func (a *analysis) fitScore() error {
	s, z, d := a.s, a.c.Treated, a.d
	defer a.clk.begin("fit")()
	model, err := score.ParseModel(s.Score.Model)
	if err != nil {
		return badInput("fit score", err)
	}
	fit, err := score.FitModel(d.x, d.names, z, score.Options{Model: model, Lambda: s.Score.Lambda, MaxIter: s.Score.MaxIter,
		Check: checker(a.ctx), OnPass: a.opt.Pass})
	if err != nil {
		return badInput("fit score", err)
	}
	a.fit = fit
	a.sum.Model = modelSummary(s.Score.Model, fit)
	a.sum.Model.CStatistic = Num(score.CStatistic(fit.PS, z))
	return nil
}

// support applies the common-support rule.
func (a *analysis) support() error {
	s, z, fit := a.s, a.c.Treated, a.fit
	defer a.clk.begin("support")()
	a.res = &results{ps: fit.PS, logit: fit.Logit}
	low, high := score.SupportBounds(s.Support, fit.PS, z)
	a.res.inSupport = score.SupportMask(s.Support, fit.PS, z)
	keptT, err := recordSupport(a.sum, s.Support, low, high, z, a.res.inSupport)
	if err != nil {
		return err
	}
	a.keptT = keptT
	a.pending = append(a.pending, NamedWeights{Name: "unadjusted"})
	a.adjs = []adjustment{{name: "unadjusted", estimand: "none"}}
	return nil
}

// balance records every adjustment's balance, in the order the stages
// before it queued them (unadjusted, matched, the schemes): kept out of
// support, match and weight so that their times are their own.
func (a *analysis) balance() error {
	z := a.c.Treated
	defer a.clk.begin("balance")()
	// Balance denominators are fixed from the unadjusted cohort so that
	// before/after SMDs are comparable (Austin & Stuart 2015).
	a.prep = balance.Prepare(a.d.vars, z, false)
	// The score itself is reported beside the covariates (its SMD and
	// variance ratio show residual imbalance along the propensity) but
	// not gated: the gate judges the covariates the analyst chose.
	a.scoreP = balance.Prepare([]balance.Variable{{Name: "logit_ps", Values: a.fit.Logit}}, z, false)
	for _, p := range a.pending {
		a.adjust(p.Name, p.W)
	}
	return nil
}

// adjust records one adjustment's balance (nil w: every unit weight 1).
func (a *analysis) adjust(name string, w []float64) {
	z := a.c.Treated
	a.diag = append(a.diag, NamedWeights{Name: name, W: w})
	st := a.prep.Compute(w)
	v := balance.Judge(st, limits(a.s))
	ab := AdjustmentBalance{Adjustment: name, Pass: v.Pass, WorstSMD: Num(v.WorstSMD), WorstVariable: v.WorstVariable, Failures: v.Failures, Stats: toStats(st)}
	ab.Score = &toStats(a.scoreP.Compute(w))[0]
	if w != nil {
		ab.ESSTreated = Num(weights.ESS(w, z, true))
		ab.ESSControl = Num(weights.ESS(w, z, false))
	} else {
		ab.ESSTreated, ab.ESSControl = Num(a.sum.Counts.Treated), Num(a.sum.Counts.Control)
	}
	a.sum.Balance = append(a.sum.Balance, ab)
}

// match builds the matched sets of the study's algorithm.
func (a *analysis) match() error {
	s, c, z, fit := a.s, a.c, a.c.Treated, a.fit
	if s.Matching.Algorithm == "off" {
		return nil
	}
	defer a.clk.begin("match")()
	sd := pooledSD(fit.Logit, z)
	width := s.Matching.Caliper * sd
	st, nstrata := strata(c, s.Matching.ExactOn)
	ms := MatchingSummary{Algorithm: s.Matching.Algorithm, Controls: s.Matching.Controls, Reuse: s.Matching.Reuse,
		CaliperSD: Num(s.Matching.Caliper), LogitSD: Num(sd), CaliperWidth: Num(width), Strata: nstrata}
	var groups []assign.Matched
	var setTreated []int
	var setControls [][]int
	estimand := "att"
	switch s.Matching.Algorithm {
	case "greedy", "optimal":
		var solver Solver
		sets, churn, err := matchUnits(matchInput{spec: s, cohort: c, logit: fit.Logit, eligible: a.res.inSupport, strata: st, width: width, prior: a.prior, solver: &solver, check: checker(a.ctx)})
		if err != nil {
			return badInput("match", err)
		}
		ms.Churn = churn
		if s.Matching.Algorithm == "optimal" {
			ms.Solver = &solver
		}
		groups = assign.FromSets(sets)
		for _, set := range sets {
			setTreated = append(setTreated, set.Treated)
			setControls = append(setControls, set.Controls)
		}
	case "full":
		gs, cert, err := assign.Full(fit.Logit, z, st, a.res.inSupport, assign.FullOptions{Caliper: width, MaxControls: s.Matching.MaxControls, MaxTreated: s.Matching.MaxTreated, Check: checker(a.ctx)})
		if err != nil {
			return badInput("match", err)
		}
		ms.Solver = &Solver{Objective: Num(cert.Objective), Certified: cert.Certified, Rounds: cert.Rounds, Edges: cert.Edges, Seconds: Num(cert.Seconds)}
		groups = assign.FromGroups(gs)
	case "strata":
		sub, err := assign.Subclasses(fit.PS, z, a.res.inSupport, s.Matching.Subclasses)
		if err != nil && !errors.Is(err, assign.ErrSubclass) {
			return badInput("match", err)
		}
		est := assign.ATT
		if s.Estimate.Estimand != "att" {
			est, estimand = assign.ATE, "ate"
		}
		sw, err := assign.SubclassWeights(sub, z, est)
		if err != nil {
			return badInput("match", err)
		}
		groups = assign.FromSubclasses(sub, z, sw)
	}
	f, err := flattenGroups(groups, c.N(), false)
	if err != nil {
		return badInput("match", err)
	}
	a.res.matches = f.rows
	if err := recordMatching(a.sum, &ms, f, len(groups), a.keptT); err != nil {
		return err
	}
	mw := f.unitWeight
	if setTreated != nil {
		// One treated unit per set: the set weights are weights.FromSets.
		mw = weights.FromSets(c.N(), setTreated, setControls)
	}
	a.pending = append(a.pending, NamedWeights{Name: "matched", W: mw})
	mr := &matchedRows{unit: f.rows.Unit, z: f.rows.Treated, w: f.rows.SetWeight,
		reuse: s.Matching.Reuse && s.Matching.Algorithm == "greedy", setTreated: setTreated, setControls: setControls}
	mr.cluster = make([]int, len(f.rows.SetID))
	for r, id := range f.rows.SetID {
		mr.cluster[r] = int(id)
	}
	if s.Matching.Controls == 1 && !s.Matching.Reuse && setTreated != nil {
		for k := range setTreated {
			if len(setControls[k]) == 1 {
				mr.pairs = append(mr.pairs, [2]int{setTreated[k], setControls[k][0]})
			}
		}
	}
	a.mr = mr
	a.adjs = append(a.adjs, adjustment{name: "matched", estimand: estimand, matched: true})
	return nil
}

// weight computes every weighting scheme's weights and their balance.
func (a *analysis) weight() error {
	s, z := a.s, a.c.Treated
	defer a.clk.begin("weight")()
	for _, scheme := range s.Schemes() {
		fn, err := weights.ByName(scheme)
		if err != nil {
			return badInput("weights", err)
		}
		w, err := applyRules(s.Rules, weights.Restrict(fn(a.fit.PS, z), a.res.inSupport), z)
		if err != nil {
			return badInput("weights "+scheme, err)
		}
		a.res.weights = append(a.res.weights, w)
		a.pending = append(a.pending, NamedWeights{Name: scheme, W: w})
		a.adjs = append(a.adjs, adjustment{name: scheme, estimand: weights.Estimand(scheme), w: w})
	}
	return nil
}

// diagnose computes the report's distribution pictures.
func (a *analysis) diagnose() error {
	defer a.clk.begin("diagnostics")()
	dg := balance.Diagnose(a.fit.PS, a.c.Treated, a.res.inSupport, a.d.vars, a.diag, balance.DefaultWorst)
	a.sum.Diagnostics = &dg
	return nil
}

// estimate judges the gate and estimates every outcome's effects: the
// plain outcomes (continuous, binary), then the time-to-event and rate
// outcomes.
func (a *analysis) estimate() error {
	s, sum := a.s, a.sum
	defer a.clk.begin("estimate")()
	judgeGate(s, sum)
	// The reader also fetched the time-to-event and rate columns; the
	// plain estimators see only the plain outcomes.
	plain := *a.c
	plain.Outcomes = nil
	for _, o := range a.c.Outcomes {
		if slices.Contains(s.Cohort.Outcomes, o.Name) {
			plain.Outcomes = append(plain.Outcomes, o)
		}
	}
	// The estimators are fast per call; the context is asked between
	// them, and the bootstrap asks it in every replicate.
	cancelled := func() error { return wrapStep("estimate", a.ctx.Err()) }
	if err := estimateAll(&plain, a.adjs, a.mr, a.fit.Logit, sum); err != nil {
		return err
	}
	if err := cancelled(); err != nil {
		return err
	}
	steps, err := estimateEvents(s, a.c, a.adjs, a.mr, sum)
	if err != nil {
		return err
	}
	a.res.survival = steps
	if err := cancelled(); err != nil {
		return err
	}
	if err := estimateRates(s, a.c, a.adjs, a.mr, sum); err != nil {
		return err
	}
	if s.Estimate.Augment {
		if err := cancelled(); err != nil {
			return err
		}
		if err := augmentAll(&plain, a.adjs, a.mr, a.d.x, sum); err != nil {
			return err
		}
	}
	a.plain = &plain
	return nil
}

// bootstrap runs the bootstrap replicates: a stage of its own, after
// estimate, since it refits the whole pipeline per replicate.
func (a *analysis) bootstrap() error {
	defer a.clk.begin("bootstrap")()
	return bootstrapAll(a.ctx, a.s, a.plain, a.d, a.sum)
}

func joinFirst(xs []string, k int) string {
	s := ""
	for i, x := range xs {
		if i == k {
			s += fmt.Sprintf("; and %d more", len(xs)-k)
			break
		}
		if i > 0 {
			s += "; "
		}
		s += x
	}
	return s
}

func mustJSON(v any) string {
	b, err := json.Marshal(v)
	if err != nil {
		// Summary types are plain structs; failure here is a programming error.
		panic(fmt.Sprintf("encode summary: %v", err))
	}
	return string(b)
}

// effectRecords turns the summary's effect rows into the effects table's.
func effectRecords(rows []EffectRow) []warehouse.EffectRecord {
	out := make([]warehouse.EffectRecord, len(rows))
	for i, e := range rows {
		out[i] = warehouse.EffectRecord{
			Outcome: e.Outcome, Adjustment: e.Adjustment, Estimand: e.Estimand, Contrast: e.Contrast, Method: e.Method,
			Estimate: float64(e.Estimate), StdError: float64(e.SE), CILow: float64(e.CILow), CIHigh: float64(e.CIHigh),
			PValue: float64(e.P), NTreated: e.NTreated, NControl: e.NControl, NMissing: e.NMissing,
			EValue: float64(e.EValue), EValueCI: float64(e.EValueCI), RosenbaumGamma: float64(e.RosenbaumGamma),
			Horizon: math.NaN(),
		}
		if e.Horizon != nil {
			out[i].Horizon = float64(*e.Horizon)
		}
	}
	return out
}
