package study

import (
	"fmt"
	"math"
	"runtime"
	"sync"

	"counterpart/match/effect"
	"counterpart/match/sensitivity"
	"counterpart/match/survival"
	"counterpart/warehouse"
)

// curveGrid is the number of equally spaced times at which the summary
// keeps each survival curve: enough for a smooth picture, and a grid (not
// the event times) so the summary shows no individual's follow-up.
const curveGrid = 100

// atRiskTicks is how many grid times carry a numbers-at-risk count.
const atRiskTicks = 6

// column returns the values of a column the reader fetched as an
// outcome-like column.
func column(c *warehouse.Cohort, name string) []float64 {
	for _, o := range c.Outcomes {
		if o.Name == name {
			return o.Values
		}
	}
	panic("study: column " + name + " was not read")
}

// rowsOf is one adjustment's rows for the time-to-event and rate
// estimators: per unit (weights, or none) or per matched-set appearance,
// clustered so that dependent rows share a cluster.
type rowsOf struct {
	unit    []int // nil: row i is unit i
	z       []bool
	w       []float64
	cluster []int
	// dependent says which interval fits the rows: the model-based one
	// for the unadjusted cohort, the robust one for weights, the
	// cluster-robust one for matched sets.
	dependent bool
}

// adjustmentRows lays out one adjustment's rows. Matched rows cluster by
// set; with reuse a control's copies in several sets cluster by the unit
// instead, since they are the same person (the dependence reuse creates).
func adjustmentRows(z []bool, a adjustment, mr *matchedRows) rowsOf {
	if !a.matched {
		return rowsOf{z: z, w: a.w}
	}
	r := rowsOf{unit: mr.unit, z: mr.z, w: mr.w, cluster: mr.cluster, dependent: true}
	if mr.reuse {
		r.cluster = mr.unit
	}
	return r
}

func (r rowsOf) pick(v []float64) []float64 {
	if r.unit == nil {
		return v
	}
	out := make([]float64, len(r.unit))
	for k, u := range r.unit {
		out[k] = v[u]
	}
	return out
}

// estimateEvents adds the effects rows and summary curves of every
// time-to-event outcome under every adjustment: the weighted Cox hazard
// ratio (Efron ties) and, at each horizon, the Kaplan–Meier survival
// difference, risk ratio and RMST difference.
func estimateEvents(s *Spec, c *warehouse.Cohort, adjs []adjustment, mr *matchedRows, sum *Summary) ([]warehouse.SurvivalStep, error) {
	var steps []warehouse.SurvivalStep
	for _, spec := range s.Cohort.TimeToEvent {
		time := column(c, spec.Time)
		event, err := survival.EventsFromFloat(column(c, spec.Event))
		if err != nil {
			return nil, badInput(fmt.Sprintf("outcome %s: column %s", spec.Name, spec.Event), fmt.Errorf("%w; use 1 for an event and 0 for censoring", err))
		}
		ev := make([]float64, len(event))
		for i, e := range event {
			if e {
				ev[i] = 1
			}
		}
		_, prevalence := eventShare(ev)
		parts, err := parallelAdjustments(len(adjs), func(k int) (eventPart, error) {
			return eventAdjustment(spec, adjs[k], c.Treated, time, ev, prevalence, mr)
		})
		if err != nil {
			return nil, err
		}
		for _, p := range parts {
			sum.Effects = append(sum.Effects, p.effects...)
			sum.Survival = append(sum.Survival, p.curves...)
			steps = append(steps, p.steps...)
		}
	}
	return steps, nil
}

// eventPart is one time-to-event outcome's rows under one adjustment.
type eventPart struct {
	effects []EffectRow
	curves  []SurvivalCurve
	steps   []warehouse.SurvivalStep
}

// eventAdjustment estimates one time-to-event outcome under one
// adjustment: the Cox hazard ratio and the Kaplan–Meier horizon rows.
func eventAdjustment(spec TimeToEventSpec, a adjustment, z []bool, time, ev []float64, prevalence float64, mr *matchedRows) (eventPart, error) {
	var p eventPart
	rows := adjustmentRows(z, a, mr)
	d := survival.Data{Time: rows.pick(time), Treated: rows.z, Weight: rows.w, Cluster: rows.cluster}
	d.Event = make([]bool, len(d.Time))
	for k, v := range rows.pick(ev) {
		d.Event[k] = v == 1
	}
	where := fmt.Sprintf("outcome %s (%s)", spec.Name, a.name)
	km, err := survival.KaplanMeier(d, spec.Horizons)
	if err != nil {
		return eventPart{}, badInput(where, fmt.Errorf("columns %s, %s: %w; fix or exclude them in cohort.sql, or pick horizons within follow-up", spec.Time, spec.Event, err))
	}
	cox, err := survival.Cox(d, survival.Efron)
	if err != nil {
		return eventPart{}, badInput(where, err)
	}
	nT, nC := armCounts(rows)
	hr := cox.Model
	method := "weighted Cox PH (Efron ties), model-based SE"
	switch {
	case rows.dependent:
		hr, method = cox.Cluster, "weighted Cox PH (Efron ties), cluster-robust SE by matched set (Lin & Wei 1989)"
	case a.w != nil:
		hr, method = cox.Robust, "weighted Cox PH (Efron ties), robust sandwich SE (Lin & Wei 1989)"
	}
	r := eventRow(spec.Name, a, effect.ContrastHazardRatio, method, nil, cox.HR, hr, nT, nC)
	if e, ok := hazardEValue(cox.HR, hr, prevalence); ok {
		r.EValue, r.EValueCI = Num(e[0]), Num(e[1])
	}
	r.PH = &PHCheck{Transform: cox.PH.Transform, ChiSq: Num(cox.PH.ChiSq), P: Num(cox.PH.P)}
	p.effects = append(p.effects, r)
	for _, h := range km.Horizons {
		hz := Num(h.Time)
		pick := func(m survival.Measure) survival.Interval {
			if rows.dependent || a.w != nil {
				return m.Robust
			}
			return m.Greenwood
		}
		what := "Kaplan–Meier, Greenwood SE"
		if rows.dependent || a.w != nil {
			what = "weighted Kaplan–Meier, influence-function (robust) SE"
			if rows.dependent {
				what += " clustered by matched set"
			}
		}
		p.effects = append(p.effects,
			eventRow(spec.Name, a, effect.ContrastSurvivalDifference, what, &hz, h.SurvDiff.Value, pick(h.SurvDiff), nT, nC),
			eventRow(spec.Name, a, effect.ContrastRiskRatio, what, &hz, h.RiskRatio.Value, pick(h.RiskRatio), nT, nC),
			eventRow(spec.Name, a, effect.ContrastRMSTDifference, what, &hz, h.RMSTDiff.Value, pick(h.RMSTDiff), nT, nC))
	}
	p.curves = append(p.curves, curves(spec, a.name, km, spec.Horizons[len(spec.Horizons)-1], rows.dependent || a.w != nil)...)
	p.steps = stepsOf(spec.Name, a.name, km)
	return p, nil
}

// parallelAdjustments runs f for every adjustment on up to GOMAXPROCS
// goroutines and returns the results in adjustment order (the first
// error, in that order, wins), so the rows do not depend on scheduling.
func parallelAdjustments[T any](n int, f func(k int) (T, error)) ([]T, error) {
	out := make([]T, n)
	errs := make([]error, n)
	sem := make(chan struct{}, runtime.GOMAXPROCS(0))
	var wg sync.WaitGroup
	for k := 0; k < n; k++ {
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer func() { <-sem; wg.Done() }()
			out[k], errs[k] = f(k)
		}()
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			return nil, err
		}
	}
	return out, nil
}

// estimateRates adds the rate ratio and rate difference of every rate
// outcome under every adjustment: weighted Poisson with a log-exposure
// offset, HC0 sandwich SE (cluster-robust for matched sets).
func estimateRates(s *Spec, c *warehouse.Cohort, adjs []adjustment, mr *matchedRows, sum *Summary) error {
	for _, spec := range s.Cohort.Rates {
		count, exposure := column(c, spec.Count), column(c, spec.Exposure)
		parts, err := parallelAdjustments(len(adjs), func(k int) ([]EffectRow, error) {
			a := adjs[k]
			rows := adjustmentRows(c.Treated, a, mr)
			d := survival.RateData{Count: rows.pick(count), Exposure: rows.pick(exposure), Treated: rows.z, Weight: rows.w, Cluster: rows.cluster}
			fit, err := survival.Rates(d, effect.RatePer)
			if err != nil {
				return nil, badInput(fmt.Sprintf("outcome %s (%s): columns %s, %s", spec.Name, a.name, spec.Count, spec.Exposure), fmt.Errorf("%w; fix or exclude them in cohort.sql", err))
			}
			nT, nC := armCounts(rows)
			rr, rd := fit.HC0, fit.DiffHC0
			method := "weighted Poisson with log-exposure offset, HC0 sandwich SE"
			if rows.dependent {
				rr, rd = fit.Cluster, fit.DiffCluster
				method = "weighted Poisson with log-exposure offset, cluster-robust SE by matched set"
			}
			r := eventRow(spec.Name, a, effect.ContrastRateRatio, method, nil, fit.RateRatio, rr, nT, nC)
			if e, ok := rateEValue(fit.RateRatio, rr); ok {
				r.EValue, r.EValueCI = Num(e[0]), Num(e[1])
			}
			return []EffectRow{r, eventRow(spec.Name, a, effect.ContrastRateDifference,
				fmt.Sprintf("weighted rate difference per %d exposure units, sandwich SE", effect.RatePer), nil, fit.Diff, rd, nT, nC)}, nil
		})
		if err != nil {
			return err
		}
		for _, p := range parts {
			sum.Effects = append(sum.Effects, p...)
		}
	}
	return nil
}

// eventRow is one effects row of a time-to-event or rate outcome.
func eventRow(outcome string, a adjustment, contrast, method string, horizon *Num, est float64, iv survival.Interval, nT, nC int) EffectRow {
	return EffectRow{Outcome: outcome, Adjustment: a.name, Estimand: a.estimand, Contrast: contrast, Method: method, Horizon: horizon,
		Estimate: Num(est), SE: Num(iv.SE), CILow: Num(iv.Lo), CIHigh: Num(iv.Hi), P: Num(iv.P), NTreated: nT, NControl: nC,
		EValue: Num(math.NaN()), EValueCI: Num(math.NaN()), RosenbaumGamma: Num(math.NaN())}
}

// armCounts counts the distinct units with positive weight per arm.
func armCounts(r rowsOf) (nT, nC int) {
	var seen []bool
	if r.unit != nil {
		n := 0
		for _, u := range r.unit {
			n = max(n, u+1)
		}
		seen = make([]bool, n)
	}
	for k, t := range r.z {
		if r.w != nil && !(r.w[k] > 0) {
			continue
		}
		if seen != nil {
			if seen[r.unit[k]] {
				continue
			}
			seen[r.unit[k]] = true
		}
		if t {
			nT++
		} else {
			nC++
		}
	}
	return nT, nC
}

// eventShare is the share of units with the event.
func eventShare(ev []float64) (n int, share float64) {
	var s float64
	for _, v := range ev {
		s += v
	}
	return len(ev), s / float64(len(ev))
}

// hazardEValue is the E-value pair (point, interval limit nearer 1) of a
// hazard ratio, converted by the outcome's share of events
// (sensitivity.EValueHR).
func hazardEValue(hr float64, iv survival.Interval, prevalence float64) ([2]float64, bool) {
	e, err := sensitivity.EValueHR(math.Log(hr), iv.SE, prevalence < sensitivity.RareOutcome)
	return [2]float64{e.Point, e.CI}, err == nil
}

// rateEValue is the E-value pair of a rate ratio (sensitivity.EValueRateRatio).
func rateEValue(rr float64, iv survival.Interval) ([2]float64, bool) {
	e, err := sensitivity.EValueRateRatio(math.Log(rr), iv.SE)
	return [2]float64{e.Point, e.CI}, err == nil
}

// SurvivalCurve is one arm's survival curve under one adjustment as the
// summary keeps it: S(t) and its pointwise 95% band S ± 1.96·SE clipped
// to [0, 1] (Greenwood SE unadjusted, the robust one under weights or
// matched sets) on curveGrid equally spaced times from 0
// to the last horizon, and the unweighted numbers at risk at atRiskTicks
// of them. A grid, not the event times, so no one's follow-up shows.
type SurvivalCurve struct {
	Outcome    string `json:"outcome"`
	Adjustment string `json:"adjustment"`
	Treated    bool   `json:"treated"`
	Time       []Num  `json:"time"`
	Survival   []Num  `json:"survival"`
	Low        []Num  `json:"low"`
	High       []Num  `json:"high"`
	TickTime   []Num  `json:"tick_time"`
	AtRisk     []int  `json:"at_risk"`
}

// curves samples both arms' Kaplan–Meier curves on the summary's grid.
func curves(spec TimeToEventSpec, adj string, km survival.KMResult, last float64, robust bool) []SurvivalCurve {
	out := make([]SurvivalCurve, 0, 2)
	for _, arm := range []int{1, 0} {
		steps := km.Curves[arm].Steps
		sc := SurvivalCurve{Outcome: spec.Name, Adjustment: adj, Treated: arm == 1}
		for g := 0; g <= curveGrid; g++ {
			t := last * float64(g) / curveGrid
			sv, se := 1.0, 0.0
			for _, st := range steps {
				if st.Time > t {
					break
				}
				sv, se = st.Surv, st.SE
				if robust {
					se = st.RobustSE
				}
			}
			sc.Time = append(sc.Time, Num(t))
			sc.Survival = append(sc.Survival, Num(sv))
			sc.Low = append(sc.Low, Num(math.Max(0, sv-survival.ZCrit*se)))
			sc.High = append(sc.High, Num(math.Min(1, sv+survival.ZCrit*se)))
		}
		for k := 0; k < atRiskTicks; k++ {
			t := last * float64(k) / float64(atRiskTicks-1)
			n := 0
			for _, st := range steps {
				if st.Time >= t {
					n = st.NAtRisk
					break
				}
			}
			sc.TickTime = append(sc.TickTime, Num(t))
			sc.AtRisk = append(sc.AtRisk, n)
		}
		out = append(out, sc)
	}
	return out
}

// stepsOf lists both arms' Kaplan–Meier steps for the survival table.
func stepsOf(outcome, adj string, km survival.KMResult) []warehouse.SurvivalStep {
	var out []warehouse.SurvivalStep
	for _, arm := range []int{1, 0} {
		for _, st := range km.Curves[arm].Steps {
			out = append(out, warehouse.SurvivalStep{Outcome: outcome, Adjustment: adj, Treated: arm == 1, Time: st.Time,
				AtRisk: st.AtRisk, Events: st.Events, Censored: st.Censored, Survival: st.Surv, StdError: st.SE})
		}
	}
	return out
}
