package study

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
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
	// SkipUnchanged ends the run without writing anything when the cohort
	// fingerprint and the study file's hash both equal those of the last
	// succeeded run.
	SkipUnchanged bool
	// Diagnostics asks for the distribution summaries the HTML report
	// plots (score histograms, eCDFs); they cost a pass per covariate and
	// adjustment, so plain runs skip them.
	Diagnostics bool
}

// Run executes one study end to end against an already open warehouse.
// The returned Summary is filled as far as the run got, also on error.
func Run(ctx context.Context, s *Spec, wh warehouse.Warehouse, opt Options) (*Summary, error) {
	now := opt.Now
	if now == nil {
		now = time.Now
	}
	stage := func(name string) {
		if opt.Stage != nil {
			opt.Stage(name)
		}
	}
	started := now()
	id, err := uuid.NewV7()
	if err != nil {
		return nil, fmt.Errorf("run id: %w", err)
	}
	sum := &Summary{
		Study: s.Study, RunID: id.String(), Engine: wh.Engine(), DryRun: opt.DryRun,
		Primary: s.Primary(), Estimand: s.Estimate.Estimand, Timings: map[string]float64{},
		ToolVersion: opt.ToolVersion, SpecSHA256: s.SHA256,
		StartedAt: started.UTC(),
	}
	lap := started
	timed := func(name string) {
		t := now()
		sum.Timings[name] = t.Sub(lap).Seconds()
		lap = t
	}

	out := warehouse.Output{Schema: s.Output.Schema, Prefix: s.Output.Prefix, Study: s.Study, KeepRuns: s.Output.KeepRuns}
	if !opt.DryRun {
		unlock, err := wh.Lock(ctx, out)
		if err != nil {
			return sum, fmt.Errorf("lock: %w", err)
		}
		defer unlock()
	}
	if s.Score.FitIn == "warehouse" {
		iw, _ := wh.(warehouse.InWarehouse)
		return runInWarehouse(ctx, s, wh, iw, opt, sum)
	}

	stage("read")
	c, err := wh.ReadCohort(ctx, warehouse.CohortQuery{
		SQL: s.Cohort.SQL, Unit: s.Cohort.Unit, Treatment: s.Cohort.Treatment,
		Outcomes: s.Cohort.Outcomes, Covariates: s.Cohort.Covariates, Categorical: s.Cohort.Categorical,
	})
	if err != nil {
		return sum, fmt.Errorf("read cohort: %w", err)
	}
	timed("read")
	out.Unit, out.IDKind, out.Treatment = c.Unit, c.IDKind, c.Treatment
	for _, cov := range c.Covariates {
		out.Covariates = append(out.Covariates, warehouse.CovariateMeta{Name: cov.Name, Kind: cov.Kind})
	}
	for _, o := range c.Outcomes {
		out.Outcomes = append(out.Outcomes, o.Name)
	}
	out.Schemes = s.Schemes()

	if opt.SkipUnchanged {
		last, ok, err := wh.LatestSucceeded(ctx, out)
		if err != nil {
			return sum, fmt.Errorf("skip unchanged: %w", err)
		}
		if ok && last.SpecSHA256 == s.SHA256 {
			// Kept in the summary, so the analysis does not hash again.
			sum.Fingerprint = fingerprint(c)
			if sum.Fingerprint == last.CohortFingerprint {
				sum.Status = warehouse.StatusSkipped
				sum.Message = "cohort and study unchanged since run " + last.RunID
				return sum, fmt.Errorf("%w (run %s)", ErrUnchanged, last.RunID)
			}
		}
	}
	var prior *priorRun
	if s.Matching.KeepPrior && s.Matching.Algorithm != "off" && !opt.DryRun {
		if last, ok, err := wh.LatestSucceeded(ctx, out); err != nil {
			return sum, fmt.Errorf("keep prior: %w", err)
		} else if ok {
			ps, err := wh.PriorSets(ctx, out, last.RunID)
			if err != nil {
				return sum, fmt.Errorf("keep prior: %w", err)
			}
			prior = &priorRun{runID: last.RunID, sets: ps}
		}
	}
	res, err := analyse(s, c, sum, stage, timed, opt.Diagnostics, prior)
	if err != nil {
		return sum, err
	}
	if opt.DryRun {
		sum.Status = "dry-run"
		return sum, nil
	}

	stage("publish")
	rec := warehouse.RunRecord{
		RunID: sum.RunID, Study: s.Study, Status: warehouse.StatusRunning, StartedAt: started.UTC(),
		ToolVersion: opt.ToolVersion, SpecSHA256: s.SHA256, SpecJSON: s.Redacted(), CohortSQL: s.Cohort.SQL,
		CohortFingerprint: sum.Fingerprint, Engine: wh.Engine(), DBUser: wh.User(ctx),
	}
	if err := wh.StartRun(ctx, out, rec); err != nil {
		return sum, fmt.Errorf("start run: %w", err)
	}
	rec.Status = warehouse.StatusSucceeded
	if !sum.Gate.Pass {
		if s.Balance.OnFail == "reject" {
			rec.Status = warehouse.StatusRejected
			rec.Message = sum.Gate.Message
		} else {
			rec.Message = "balance warning: " + sum.Gate.Message
		}
	}
	sum.Status = rec.Status
	sum.Message = rec.Message
	rec.CountsJSON = mustJSON(sum.Counts)
	rec.ModelJSON = mustJSON(sum.Model)
	rec.BalanceJSON = mustJSON(struct {
		Gate        Gate                `json:"gate"`
		Adjustments []AdjustmentBalance `json:"adjustments"`
	}{sum.Gate, sum.Balance})
	rec.EffectsJSON = mustJSON(sum.Effects)
	rec.FinishedAt = now().UTC()
	sum.Status, sum.FinishedAt = rec.Status, rec.FinishedAt
	rec.SummaryJSON = mustJSON(sum)
	pub := &warehouse.Publication{
		Run: rec, Cohort: c, PS: res.ps, LogitPS: res.logit, InSupport: res.inSupport,
		Matches: res.matches, Weights: res.weights, Effects: effectRecords(sum.Effects),
	}
	if err := wh.Publish(ctx, out, pub); err != nil {
		msg := err.Error()
		// Use a fresh context: the run's may be the one that was cancelled.
		fctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		_ = wh.FailRun(fctx, out, sum.RunID, msg)
		sum.Status = warehouse.StatusFailed
		return sum, fmt.Errorf("publish: %w", err)
	}
	timed("publish")
	sum.FinishedAt = rec.FinishedAt
	if rec.Status == warehouse.StatusRejected {
		return sum, fmt.Errorf("%w: %s", ErrRejected, sum.Gate.Message)
	}
	return sum, nil
}

// results are the per-unit values publish writes.
type results struct {
	ps, logit []float64
	inSupport []bool
	matches   warehouse.MatchRows
	weights   [][]float64
}

// badInput classes a stage error as a problem with the data or the study
// (exit 2): the stages are pure, so their errors are never the database's.
func badInput(step string, err error) error {
	return fmt.Errorf("%s: %w: %w", step, warehouse.ErrBadInput, err)
}

// analyse runs every statistical stage on the cohort and fills the summary.
func analyse(s *Spec, c *warehouse.Cohort, sum *Summary, stage func(string), timed func(string), diagnostics bool, prior *priorRun) (*results, error) {
	n := c.N()
	z := c.Treated
	nt := 0
	for _, t := range z {
		if t {
			nt++
		}
	}
	sum.Counts = Counts{Units: n, Treated: nt, Control: n - nt}
	if nt == 0 {
		return nil, fmt.Errorf("read cohort: %w: column %s is false for every unit; the cohort needs treated units", warehouse.ErrBadInput, c.Treatment)
	}
	if nt == n {
		return nil, fmt.Errorf("read cohort: %w: column %s is true for every unit; the cohort needs comparison (untreated) units", warehouse.ErrBadInput, c.Treatment)
	}
	if err := checkTextNumbers(s, c); err != nil {
		return nil, err
	}
	// The fingerprint only needs the cohort: hash it while the model fits
	// (unless the skip-unchanged check already did).
	if sum.Fingerprint == "" {
		fp := make(chan string, 1)
		go func() { fp <- fingerprint(c) }()
		defer func() { sum.Fingerprint = <-fp }()
	}
	d, err := buildDesign(c)
	if err != nil {
		return nil, fmt.Errorf("design: %w", err)
	}

	stage("fit")
	model := score.Logistic
	if s.Score.Model == "ridge" {
		model = score.Ridge
	}
	fit, err := score.FitModel(d.x, d.names, z, score.Options{Model: model, Lambda: s.Score.Lambda, MaxIter: s.Score.MaxIter})
	if err != nil {
		return nil, badInput("fit score", err)
	}
	sum.Model = ModelSummary{Kind: s.Score.Model, Iterations: fit.Iterations, Converged: fit.Converged,
		LogLik: Num(fit.LogLik), NullLogLik: Num(fit.NullLogLik), CStatistic: Num(score.CStatistic(fit.PS, z))}
	for j, name := range fit.Names {
		sum.Model.Terms = append(sum.Model.Terms, Term{Name: name, Coef: Num(fit.Coef[j]), SE: Num(fit.SE[j])})
	}
	timed("fit")

	res := &results{ps: fit.PS, logit: fit.Logit, inSupport: make([]bool, n)}
	low, high := score.SupportBounds(s.Support, fit.PS, z)
	var keptT, keptC int
	for i, p := range fit.PS {
		in := p >= low && p <= high
		res.inSupport[i] = in
		if in {
			if z[i] {
				keptT++
			} else {
				keptC++
			}
		}
	}
	sum.Support = Support{Rule: s.Support, Low: Num(low), High: Num(high), Dropped: n - keptT - keptC}
	sum.Counts.SupportTreated, sum.Counts.SupportControl = keptT, keptC
	if keptT == 0 || keptC == 0 {
		return nil, fmt.Errorf("support: %w: the %s rule leaves %d treated and %d comparison units; relax support", warehouse.ErrBadInput, s.Support, keptT, keptC)
	}

	// Balance denominators are fixed from the unadjusted cohort so that
	// before/after SMDs are comparable (Austin & Stuart 2015).
	prep := balance.Prepare(d.vars, z, false)
	// The score itself is reported beside the covariates (its SMD and
	// variance ratio show residual imbalance along the propensity) but
	// not gated: the gate judges the covariates the analyst chose.
	scorePrep := balance.Prepare([]balance.Variable{{Name: "logit_ps", Values: fit.Logit}}, z, false)
	var diagAdj []NamedWeights
	adjust := func(name string, w []float64) {
		diagAdj = append(diagAdj, NamedWeights{Name: name, W: w})
		st := prep.Compute(w)
		v := balance.Judge(st, balance.Limits{SMD: s.Balance.SMDLimit, VarRatio: s.Balance.VarianceRatioLimit})
		ab := AdjustmentBalance{Adjustment: name, Pass: v.Pass, WorstSMD: Num(v.WorstSMD), WorstVariable: v.WorstVariable, Failures: v.Failures, Stats: toStats(st)}
		ab.Score = &toStats(scorePrep.Compute(w))[0]
		if w != nil {
			ab.ESSTreated = Num(weights.ESS(w, z, true))
			ab.ESSControl = Num(weights.ESS(w, z, false))
		} else {
			ab.ESSTreated, ab.ESSControl = Num(nt), Num(n-nt)
		}
		sum.Balance = append(sum.Balance, ab)
	}
	adjust("unadjusted", nil)

	adjs := []adjustment{{name: "unadjusted", estimand: "none"}}
	var mr *matchedRows
	if s.Matching.Algorithm != "off" {
		stage("match")
		sd := pooledSD(fit.Logit, z)
		width := s.Matching.Caliper * sd
		st, nstrata := strata(c, s.Matching.ExactOn)
		ms := MatchingSummary{Algorithm: s.Matching.Algorithm, Controls: s.Matching.Controls, Reuse: s.Matching.Reuse,
			CaliperSD: Num(s.Matching.Caliper), LogitSD: Num(sd), CaliperWidth: Num(width), Strata: nstrata}
		var groups []group
		var setTreated []int
		var setControls [][]int
		estimand := "att"
		switch s.Matching.Algorithm {
		case "greedy", "optimal":
			var solver Solver
			sets, churn, err := matchUnits(matchInput{spec: s, cohort: c, logit: fit.Logit, eligible: res.inSupport, strata: st, width: width, prior: prior, solver: &solver})
			if err != nil {
				return nil, badInput("match", err)
			}
			ms.Churn = churn
			if s.Matching.Algorithm == "optimal" {
				ms.Solver = &solver
			}
			groups = setsToGroups(sets)
			for _, set := range sets {
				setTreated = append(setTreated, set.Treated)
				setControls = append(setControls, set.Controls)
			}
		case "full":
			gs, cert, err := assign.Full(fit.Logit, z, st, res.inSupport, assign.FullOptions{Caliper: width, MaxControls: s.Matching.MaxControls, MaxTreated: s.Matching.MaxTreated})
			if err != nil {
				return nil, badInput("match", err)
			}
			ms.Solver = &Solver{Objective: Num(cert.Objective), Certified: cert.Certified, Rounds: cert.Rounds, Edges: cert.Edges, Seconds: Num(cert.Seconds)}
			groups = fullToGroups(gs)
		case "strata":
			sub, err := assign.Subclasses(fit.PS, z, res.inSupport, s.Matching.Subclasses)
			if err != nil && !errors.Is(err, assign.ErrSubclass) {
				return nil, badInput("match", err)
			}
			est := assign.ATT
			if s.Estimate.Estimand != "att" {
				est, estimand = assign.ATE, "ate"
			}
			sw, err := assign.SubclassWeights(sub, z, est)
			if err != nil {
				return nil, badInput("match", err)
			}
			groups = subclassGroups(sub, z, sw)
		}
		ms.Sets = len(groups)
		used := map[int]bool{}
		total := 0.0
		mw := make([]float64, n)
		matchedT := 0
		for _, g := range groups {
			for j, u := range append(append([]int(nil), g.treated...), g.controls...) {
				isT := j < len(g.treated)
				wt := g.wC
				if isT {
					wt = g.wT
				}
				if g.w != nil {
					wt = g.w[j]
				}
				dist := math.NaN()
				if g.dist != nil {
					dist = g.dist[j]
					total += dist
				}
				res.matches.SetID = append(res.matches.SetID, int64(g.id))
				res.matches.Unit = append(res.matches.Unit, u)
				res.matches.Treated = append(res.matches.Treated, isT)
				res.matches.SetWeight = append(res.matches.SetWeight, wt)
				res.matches.Distance = append(res.matches.Distance, dist)
				mw[u] += wt
				if isT {
					matchedT++
				} else {
					used[u] = true
				}
			}
		}
		ms.TotalDistance = Num(total)
		ms.MatchedTreated = matchedT
		ms.UnmatchedTreated = keptT - matchedT
		ms.MatchedControls = len(used)
		sum.Matching = &ms
		sum.Counts.MatchedTreated, sum.Counts.MatchedControl = ms.MatchedTreated, ms.MatchedControls
		timed("match")
		if matchedT == 0 {
			return nil, fmt.Errorf("match: %w: no treated unit found a comparison unit within the caliper (%.3g on logit scale); widen matching.caliper or check support", warehouse.ErrBadInput, width)
		}
		adjust("matched", mw)
		mr = &matchedRows{unit: res.matches.Unit, z: res.matches.Treated, w: res.matches.SetWeight,
			reuse: s.Matching.Reuse && s.Matching.Algorithm == "greedy", setTreated: setTreated, setControls: setControls}
		mr.cluster = make([]int, len(res.matches.SetID))
		for r, id := range res.matches.SetID {
			mr.cluster[r] = int(id)
		}
		if s.Matching.Controls == 1 && !s.Matching.Reuse && setTreated != nil {
			for k := range setTreated {
				if len(setControls[k]) == 1 {
					mr.pairs = append(mr.pairs, [2]int{setTreated[k], setControls[k][0]})
				}
			}
		}
		adjs = append(adjs, adjustment{name: "matched", estimand: estimand, matched: true})
	}

	stage("weight")
	for _, scheme := range s.Schemes() {
		fn, err := weights.ByName(scheme)
		if err != nil {
			return nil, badInput("weights", err)
		}
		w, err := applyRules(s.Rules, weights.Restrict(fn(fit.PS, z), res.inSupport), z)
		if err != nil {
			return nil, badInput("weights "+scheme, err)
		}
		res.weights = append(res.weights, w)
		adjust(scheme, w)
		adjs = append(adjs, adjustment{name: scheme, estimand: estimandOf[scheme], w: w})
	}
	timed("weight")
	if diagnostics {
		dg := balance.Diagnose(fit.PS, z, res.inSupport, d.vars, diagAdj, balance.DefaultWorst)
		sum.Diagnostics = &dg
		timed("diagnostics")
	}

	// The gate judges the adjustment behind the headline estimate.
	sum.Gate = Gate{Adjustment: s.Primary(), OnFail: s.Balance.OnFail, Pass: true,
		SMDLimit: Num(s.Balance.SMDLimit), VRLimit: Num(s.Balance.VarianceRatioLimit)}
	for _, ab := range sum.Balance {
		if ab.Adjustment == sum.Gate.Adjustment {
			sum.Gate.Pass = ab.Pass
			sum.Gate.WorstSMD, sum.Gate.WorstVariable = ab.WorstSMD, ab.WorstVariable
			if !ab.Pass {
				sum.Gate.Message = fmt.Sprintf("%s balance fails the limits (|SMD| < %g, variance ratio within 1/%g..%g): %s",
					ab.Adjustment, s.Balance.SMDLimit, s.Balance.VarianceRatioLimit, s.Balance.VarianceRatioLimit, joinFirst(ab.Failures, 5))
			}
		}
	}

	stage("estimate")
	if err := estimateAll(c, adjs, mr, fit.Logit, sum); err != nil {
		return nil, err
	}
	if s.Estimate.Augment {
		if err := augmentAll(c, adjs, mr, d.x, sum); err != nil {
			return nil, err
		}
	}
	if s.Estimate.Bootstrap > 0 {
		stage("bootstrap")
		if err := bootstrapAll(s, c, d, sum); err != nil {
			return nil, err
		}
		timed("bootstrap")
	}
	timed("estimate")
	return res, nil
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

// Headline returns the effect rows of the primary adjustment.
func (s *Summary) Headline() []EffectRow {
	var out []EffectRow
	for _, e := range s.Effects {
		if e.Adjustment == s.Primary {
			out = append(out, e)
		}
	}
	return out
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
		}
	}
	return out
}
