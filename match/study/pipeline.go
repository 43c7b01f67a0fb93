package study

import (
	"context"
	"fmt"
	"math"
	"sync"
	"time"

	"counterpart/match/assign"
	"counterpart/match/balance"
	"counterpart/match/score"
	"counterpart/warehouse"
)

// This file holds the pieces both run modes share — the in-memory
// pipeline (run.go) and the warehouse-scale one (warehousemode.go) — so
// that a run's clock, model summary, support counts, matches rows, gate,
// runs row and failure handling are written once.

// clock times a run's stages, each by itself. A stage is opened with
// begin (announced to the progress display) or part (a quiet stretch of
// work billed to a stage while another is open, such as the balance sums
// computed inside the warehouse-scale publish transaction); opening one
// pauses the stage that was running, and closing it resumes that stage.
// So at any moment at most one stage is billed, the recorded intervals
// are disjoint, and their sum is at most the run's wall time: the gaps are
// work no stage owns (the lock, engine tuning, the COMMIT after the end is
// stamped). Work running beside the stages (the cohort fingerprint's hash)
// is recorded by overlap, apart from the stage sum.
//
// The clock reads wall time truncated to microseconds, as both engines
// store timestamps, so that started_at, finished_at and the stage
// intervals in the summary agree to the microsecond.
type clock struct {
	mu      sync.Mutex
	now     func() time.Time
	onStage func(string)
	onDone  func(string, float64)
	start   time.Time
	sum     *Summary
	// open is the stack of open stages: the top one runs, the others
	// are paused.
	open []*openStage
}

// openStage is a stage begun and not yet ended; from is when its current
// interval started.
type openStage struct {
	name string
	from time.Time
}

// newClock starts the run's clock and stamps the summary's start with it.
func newClock(opt Options, sum *Summary) *clock {
	now := opt.Now
	if now == nil {
		now = time.Now
	}
	c := &clock{now: now, onStage: opt.Stage, onDone: opt.StageDone, sum: sum}
	c.start = c.read()
	sum.StartedAt = c.start
	if sum.Timings == nil {
		sum.Timings = map[string]float64{}
	}
	return c
}

func (c *clock) read() time.Time { return c.now().UTC().Truncate(time.Microsecond) }

// begin announces a stage and opens it; the returned function ends it
// (once; later calls return the same end) and returns its end time. A nil
// clock times nothing.
func (c *clock) begin(name string) func() time.Time {
	if c == nil {
		return noEnd
	}
	// Announced before the clock starts: the display (and a test's pause
	// at a stage's start) is not the stage's work.
	if c.onStage != nil {
		c.onStage(name)
	}
	return c.openStage(name)
}

// part opens a quiet stretch billed to name, pausing the running stage.
func (c *clock) part(name string) func() time.Time {
	if c == nil {
		return noEnd
	}
	return c.openStage(name)
}

func noEnd() time.Time { return time.Time{} }

func (c *clock) openStage(name string) func() time.Time {
	c.mu.Lock()
	t := c.read()
	if n := len(c.open); n > 0 {
		c.record(c.open[n-1].name, c.open[n-1].from, t, false)
	}
	st := &openStage{name: name, from: t}
	c.open = append(c.open, st)
	c.mu.Unlock()
	var once sync.Once
	var end time.Time
	return func() time.Time {
		once.Do(func() { end = c.close(st) })
		return end
	}
}

// close ends st: the running interval (st's, or a stage opened inside st
// and left open by an error return) is recorded, st and anything above it
// leave the stack, and the stage below resumes.
func (c *clock) close(st *openStage) time.Time {
	c.mu.Lock()
	t := c.read()
	i := len(c.open) - 1
	for i >= 0 && c.open[i] != st {
		i--
	}
	if i < 0 {
		c.mu.Unlock()
		return t
	}
	top := c.open[len(c.open)-1]
	c.record(top.name, top.from, t, top == st)
	c.open = c.open[:i]
	if n := len(c.open); n > 0 {
		c.open[n-1].from = t
	}
	total := c.sum.Timings[st.name]
	c.mu.Unlock()
	if c.onDone != nil {
		c.onDone(st.name, total)
	}
	return t
}

// record bills [from, to) to name. A paused stage's empty interval (a
// part opened right after it resumed) is not listed.
func (c *clock) record(name string, from, to time.Time, closing bool) {
	d := max(to.Sub(from), 0).Seconds()
	c.sum.Timings[name] += d
	if d > 0 || closing {
		c.sum.Stages = append(c.sum.Stages, StageTime{Name: name, Start: from.Sub(c.start).Seconds(), Seconds: d})
	}
}

// overlap times work running beside the stages (safe from any
// goroutine): it goes to the summary's overlapping seconds and its stage
// list, marked, never into the stage sum.
func (c *clock) overlap(name string) func() {
	if c == nil {
		return func() {}
	}
	from := c.read()
	return func() {
		c.mu.Lock()
		defer c.mu.Unlock()
		to := c.read()
		d := max(to.Sub(from), 0).Seconds()
		if c.sum.Overlapping == nil {
			c.sum.Overlapping = map[string]float64{}
		}
		c.sum.Overlapping[name] += d
		c.sum.Stages = append(c.sum.Stages, StageTime{Name: name, Start: from.Sub(c.start).Seconds(), Seconds: d, Overlaps: true})
	}
}

// modelSummary is the summary's record of a fitted score model; the
// c-statistic is filled by the caller from whichever scores it holds.
func modelSummary(kind string, fit *score.Fit) ModelSummary {
	m := ModelSummary{Kind: kind, Iterations: fit.Iterations, Converged: fit.Converged,
		LogLik: Num(fit.LogLik), NullLogLik: Num(fit.NullLogLik)}
	for j, name := range fit.Names {
		m.Terms = append(m.Terms, Term{Name: name, Coef: Num(fit.Coef[j]), SE: Num(fit.SE[j])})
	}
	return m
}

// recordSupport counts the units kept by the common-support rule per arm,
// records the interval (score scale) and refuses a rule that empties an
// arm. It returns the kept treated count.
func recordSupport(sum *Summary, rule string, low, high float64, z, in []bool) (int, error) {
	var keptT, keptC int
	for i, ok := range in {
		if ok {
			if z[i] {
				keptT++
			} else {
				keptC++
			}
		}
	}
	sum.Support = Support{Rule: rule, Low: Num(low), High: Num(high), Dropped: len(z) - keptT - keptC}
	sum.Counts.SupportTreated, sum.Counts.SupportControl = keptT, keptC
	if keptT == 0 || keptC == 0 {
		return keptT, fmt.Errorf("support: %w: the %s rule leaves %d treated and %d comparison units; relax support", warehouse.ErrBadInput, rule, keptT, keptC)
	}
	return keptT, nil
}

// flatSets is a matching's groups flattened to the matches table's rows,
// with each unit's summed set weight.
type flatSets struct {
	rows warehouse.MatchRows
	// unitWeight[u] sums unit u's set weights over its sets.
	unitWeight []float64
	total      float64
	matchedT   int
	controls   int
}

// flattenGroups turns matched groups into one row per set appearance:
// treated first, then controls, in group order. once refuses a control
// in two sets (warehouse-scale sums read one weight per unit).
func flattenGroups(groups []assign.Matched, n int, once bool) (flatSets, error) {
	f := flatSets{unitWeight: make([]float64, n)}
	used := map[int]bool{}
	for _, g := range groups {
		for j, u := range append(append([]int(nil), g.Treated...), g.Controls...) {
			isT := j < len(g.Treated)
			wt := g.ControlWeight
			if isT {
				wt = g.TreatedWeight
			}
			if g.Weights != nil {
				wt = g.Weights[j]
			}
			dist := math.NaN()
			if g.Distances != nil {
				dist = g.Distances[j]
				f.total += dist
			}
			f.rows.SetID = append(f.rows.SetID, int64(g.ID))
			f.rows.Unit = append(f.rows.Unit, u)
			f.rows.Treated = append(f.rows.Treated, isT)
			f.rows.SetWeight = append(f.rows.SetWeight, wt)
			f.rows.Distance = append(f.rows.Distance, dist)
			f.unitWeight[u] += wt
			if isT {
				f.matchedT++
				continue
			}
			if once && used[u] {
				return f, fmt.Errorf("match: comparison unit %d is in two sets; warehouse-scale mode matches without reuse", u)
			}
			used[u] = true
		}
	}
	f.controls = len(used)
	return f, nil
}

// recordMatching completes the matching summary from the flattened sets
// and refuses a matching in which no treated unit found a comparison.
func recordMatching(sum *Summary, ms *MatchingSummary, f flatSets, sets, keptT int) error {
	ms.Sets = sets
	ms.TotalDistance = Num(f.total)
	ms.MatchedTreated = f.matchedT
	ms.UnmatchedTreated = keptT - f.matchedT
	ms.MatchedControls = f.controls
	sum.Matching = ms
	sum.Counts.MatchedTreated, sum.Counts.MatchedControl = ms.MatchedTreated, ms.MatchedControls
	if f.matchedT == 0 {
		return fmt.Errorf("match: %w: no treated unit found a comparison unit within the caliper (%.3g on logit scale); widen matching.caliper or check support", warehouse.ErrBadInput, float64(ms.CaliperWidth))
	}
	return nil
}

// limits are the study's balance limits.
func limits(s *Spec) balance.Limits {
	return balance.Limits{SMD: s.Balance.SMDLimit, VarRatio: s.Balance.VarianceRatioLimit}
}

// judgeGate sets the gate from the balance of the adjustment behind the
// headline estimate.
func judgeGate(s *Spec, sum *Summary) {
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
}

// newRunRecord is the runs row as StartRun writes it: status running.
func newRunRecord(ctx context.Context, s *Spec, wh warehouse.Warehouse, opt Options, sum *Summary) warehouse.RunRecord {
	return warehouse.RunRecord{
		RunID: sum.RunID, Study: s.Study, Status: warehouse.StatusRunning, StartedAt: sum.StartedAt,
		ToolVersion: opt.ToolVersion, SpecSHA256: s.SHA256, SpecJSON: s.Redacted(), CohortSQL: s.Cohort.SQL,
		CohortFingerprint: sum.Fingerprint, Engine: wh.Engine(), DBUser: wh.User(ctx),
	}
}

// settleRecord gives the runs row its final status (the gate decides
// between succeeded and rejected) and the summary's JSON columns.
func settleRecord(r *warehouse.RunRecord, s *Spec, sum *Summary, now time.Time) {
	r.Status = warehouse.StatusSucceeded
	if !sum.Gate.Pass {
		if s.Balance.OnFail == "reject" {
			r.Status, r.Message = warehouse.StatusRejected, sum.Gate.Message
		} else {
			r.Message = "balance warning: " + sum.Gate.Message
		}
	}
	sum.Status, sum.Message = r.Status, r.Message
	r.CountsJSON = mustJSON(sum.Counts)
	r.ModelJSON = mustJSON(sum.Model)
	r.BalanceJSON = mustJSON(struct {
		Gate        Gate                `json:"gate"`
		Adjustments []AdjustmentBalance `json:"adjustments"`
	}{sum.Gate, sum.Balance})
	r.EffectsJSON = mustJSON(sum.Effects)
	// Provisional: the publish transaction's last statement replaces the
	// finish time and the summary with those of sealRun.
	r.FinishedAt = now.UTC()
	sum.FinishedAt = r.FinishedAt
	r.SummaryJSON = mustJSON(sum)
}

// sealRun is the publication's Seal, called by the publish transaction's
// last statement before COMMIT: it ends the publish stage on the run's
// clock and returns that instant as the run's finished_at with the
// summary to store beside it. So the stored summary's finished_at equals
// the runs row's, its publish seconds run up to that statement, and the
// row's duration includes publishing; only the COMMIT comes after (a
// summary cannot record the commit of the transaction that stores it).
func sealRun(sum *Summary, endPublish func() time.Time) func() (time.Time, string) {
	return func() (time.Time, string) {
		end := endPublish()
		sum.FinishedAt = end
		return end, mustJSON(sum)
	}
}

// failPublish marks the run failed after a publish error — or cancelled,
// when the run's context ended (a signal), whatever error the engine made
// of that — on a fresh context, since the run's may be the one that was
// cancelled, and returns the error named once. The fresh context is short:
// a cancelled run has about two seconds to be gone.
func failPublish(ctx context.Context, wh warehouse.Warehouse, out warehouse.Output, sum *Summary, err error) error {
	fctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	if cerr := ctx.Err(); cerr != nil {
		fctx, cancel = context.WithTimeout(context.Background(), time.Second)
		defer cancel()
		if wh.CancelRun(fctx, out, sum.RunID, "cancelled by a signal during publishing; nothing was published") == nil {
			sum.Status = warehouse.StatusCancelled
		}
		return fmt.Errorf("publish: %w", cerr)
	}
	_ = wh.FailRun(fctx, out, sum.RunID, err.Error())
	sum.Status = warehouse.StatusFailed
	return fmt.Errorf("publish: %w", err)
}

// startFailed names a StartRun error. When the run was cancelled the row
// may have been written before the engine noticed, so it is marked
// cancelled if it is there.
func startFailed(ctx context.Context, wh warehouse.Warehouse, out warehouse.Output, sum *Summary, err error) error {
	if ctx.Err() != nil {
		return failPublish(ctx, wh, out, sum, err)
	}
	return fmt.Errorf("start run: %w", err)
}

// finishRun turns a published run's status into the run's error: a
// rejected run exits 3.
func finishRun(sum *Summary) error {
	if sum.Status == warehouse.StatusRejected {
		return fmt.Errorf("%w: %s", ErrRejected, sum.Gate.Message)
	}
	return nil
}
