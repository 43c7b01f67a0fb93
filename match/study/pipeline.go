package study

import (
	"context"
	"fmt"
	"math"
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

// clock times a run's stages: stage announces one (progress display),
// timed records the seconds since the previous mark under a name.
type clock struct {
	now     func() time.Time
	onStage func(string)
	lap     time.Time
	sum     *Summary
}

func newClock(opt Options, sum *Summary) *clock {
	now := opt.Now
	if now == nil {
		now = time.Now
	}
	return &clock{now: now, onStage: opt.Stage, lap: now(), sum: sum}
}

func (c *clock) stage(name string) {
	if c.onStage != nil {
		c.onStage(name)
	}
}

func (c *clock) timed(name string) {
	t := c.now()
	c.sum.Timings[name] = t.Sub(c.lap).Seconds()
	c.lap = t
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
	r.FinishedAt = now.UTC()
	sum.FinishedAt = r.FinishedAt
	r.SummaryJSON = mustJSON(sum)
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
