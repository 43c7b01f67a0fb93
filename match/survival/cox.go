package survival

import (
	"fmt"
	"math"
)

// Ties selects the partial-likelihood approximation for tied event times.
type Ties int

const (
	// Efron's approximation (R coxph's default): the k-th of d tied
	// events sees the tied events' risk reduced by (k−1)/d, and each
	// event contributes the mean weight of the tied events (R's rule
	// for weighted ties).
	Efron Ties = iota
	// Breslow's approximation: every tied event sees the full risk set.
	Breslow
)

// String is the name R's coxph uses for the method ("efron", "breslow"),
// so tables and reports can name it the way the reference does.
func (t Ties) String() string {
	if t == Breslow {
		return "breslow"
	}
	return "efron"
}

// CoxFit is a weighted Cox proportional-hazards fit with treatment as the
// only covariate.
type CoxFit struct {
	Ties Ties
	// LogHR is the maximum partial-likelihood estimate of the log hazard
	// ratio, treated vs control; HR = exp(LogHR).
	LogHR, HR float64
	// Model is based on the weighted information, 1/I (R coxph naive.var;
	// valid for frequency weights). Robust is the Lin & Wei (1989)
	// sandwich Σ_i (w_i D_i)², D_i the dfbeta (score residual / I), as
	// R coxph(robust = TRUE). Cluster sums w_i D_i within clusters before
	// squaring (R coxph(cluster = c)); it equals Robust without clusters.
	// SEs are on the log scale; intervals are for HR.
	Model, Robust, Cluster Interval
	// LogLik and LogLik0 are the weighted log partial likelihood at the
	// estimate and at 0.
	LogLik, LogLik0 float64
	Iterations      int
	// PH is the proportional-hazards check; it is reported, not gating.
	PH PHCheck
}

// PHCheck is the score test of a time-varying treatment coefficient,
// β(t) = β + θ·g(t), of R cox.zph(fit, transform = "km"): g(t) is one
// minus the unweighted pooled Kaplan–Meier curve just before t, centred on
// its mean over event rows; the test is U_θ² / (I_θθ − I_θβ²/I_ββ) at
// (β̂, 0), chi-square with 1 df. A small P suggests the hazard ratio
// changes over follow-up.
type PHCheck struct {
	Transform string
	ChiSq, P  float64
}

// maxNewton bounds the Newton–Raphson iterations; a well-posed
// one-parameter fit converges in well under 10.
const maxNewton = 50

// coxTime is one distinct event time: weighted events and weighted at-risk
// per arm, and the number of tied events (for Efron).
type coxTime struct {
	t      float64
	dw, rw [2]float64
	nd     int
	// Score-residual increments at t (see coxEval): for rows at risk,
	// and for the tied event rows themselves.
	h, g, hOwn, gOwn float64
	// xbb is (1/d) Σ_k x̄_k, the Efron-averaged risk-set mean of z.
	xbb float64
}

// Cox fits the weighted Cox model log h(t | z) = log h₀(t) + β·z by
// Newton–Raphson on the partial likelihood (R coxph(Surv(t, e) ~ z,
// weights = w, ties = ...)). Because z is binary the fit needs only, at each
// event time, the weighted events and weighted number at risk of each arm;
// the score residuals then depend on a row's arm, time and status alone.
func Cox(d Data, ties Ties) (CoxFit, error) {
	if err := d.validate(); err != nil {
		return CoxFit{}, fmt.Errorf("cox: %w", err)
	}
	d, err := d.dropZeroWeights()
	if err != nil {
		return CoxFit{}, fmt.Errorf("cox: %w", err)
	}
	order := d.canonical()
	n := len(order)
	// Event times and each row's index into them: tix[i] is the first
	// event time ≥ the row's time (rows at risk at every earlier one).
	var ts []coxTime
	tix := make([]int32, n)
	events := 0
	for _, i := range order {
		if d.Event[i] {
			events += d.rows(int(i))
			t := d.Time[i]
			if len(ts) == 0 || ts[len(ts)-1].t != t {
				ts = append(ts, coxTime{t: t})
			}
			c := &ts[len(ts)-1]
			c.dw[b2i(d.Treated[i])] += d.weight(int(i))
			c.nd += d.rows(int(i))
		}
	}
	if events == 0 {
		return CoxFit{}, fmt.Errorf("cox: 0 units have an event; a hazard ratio needs events")
	}
	{
		// An arm without weighted events has a log HR of ±∞ (monotone
		// likelihood); refuse rather than report a non-converged value.
		var dw [2]float64
		var cnt [2]int
		for i, e := range d.Event {
			a := b2i(d.Treated[i])
			cnt[a] += d.rows(i)
			if e {
				dw[a] += d.weight(i)
			}
		}
		for a, name := range []string{"control", "treated"} {
			if !(dw[a] > 0) {
				return CoxFit{}, fmt.Errorf("cox: the %s arm's %d units have 0 weighted events; a hazard ratio needs events in both arms", name, cnt[a])
			}
		}
	}
	{
		var r [2]float64
		j := len(ts) - 1
		for p := n - 1; p >= 0; p-- {
			i := order[p]
			for j >= 0 && ts[j].t > d.Time[i] {
				ts[j].rw = r
				j--
			}
			r[b2i(d.Treated[i])] += d.weight(int(i))
			tix[i] = int32(j + 1)
			if j >= 0 && ts[j].t == d.Time[i] {
				tix[i] = int32(j)
			}
		}
		for ; j >= 0; j-- {
			ts[j].rw = r
		}
	}
	fit := CoxFit{Ties: ties}
	var info float64
	fit.LogLik0, _, _ = coxEval(ts, 0, ties, false)
	beta := 0.0
	converged := false
	for it := 1; it <= maxNewton; it++ {
		ll, u, info := coxEval(ts, beta, ties, false)
		if !(info > 0) {
			return CoxFit{}, fmt.Errorf("cox: information %v at log HR %v; the arms' event times do not overlap enough to estimate a hazard ratio", info, beta)
		}
		step := u / info
		fit.Iterations = it
		// Converged when the Newton step is negligible; the step is still
		// taken, and by quadratic convergence leaves an error of order
		// step². Comparing log likelihoods here instead would stop on
		// rounding noise before the score is 0.
		if math.Abs(step) <= 1e-10*math.Max(1, math.Abs(beta)) {
			beta += step
			converged = true
			break
		}
		next := beta + step
		// Step halving, as R's coxph does, only when the likelihood
		// falls by more than rounding.
		nll, _, _ := coxEval(ts, next, ties, false)
		for half := 0; nll < ll-1e-12*math.Abs(ll) && half < 30; half++ {
			step /= 2
			next = beta + step
			nll, _, _ = coxEval(ts, next, ties, false)
		}
		beta = next
		if math.Abs(beta) > 50 {
			return CoxFit{}, fmt.Errorf("cox: log hazard ratio diverges (|β| > 50); one arm has no events or no unit at risk at the other arm's events")
		}
	}
	if !converged {
		return CoxFit{}, fmt.Errorf("cox: Newton–Raphson did not converge in %d iterations (log HR %v)", maxNewton, beta)
	}
	fit.LogLik, _, info = coxEval(ts, beta, ties, true)
	fit.LogHR, fit.HR = beta, math.Exp(beta)
	fit.Model = interval(fit.HR, math.Sqrt(1/info), true)

	// Score residuals: U_i = δ_i (z_i − x̄̄_t) − r_i Σ_{t_j ≤ T_i} c_ij (z_i − x̄_jk) dΛ_jk,
	// with c = 1 − (k−1)/d for a tied event row at its own time (Efron).
	ch := make([]float64, len(ts)+1) // cumulative Σ_j H_j, Σ_j G_j before j
	cg := make([]float64, len(ts)+1)
	for j := range ts {
		ch[j+1] = ch[j] + ts[j].h
		cg[j+1] = cg[j] + ts[j].g
	}
	r1 := math.Exp(beta)
	ur := make([]float64, n)
	for i := 0; i < n; i++ {
		j := int(tix[i])
		z := 0.0
		risk := 1.0
		if d.Treated[i] {
			z, risk = 1, r1
		}
		var res float64
		own := j < len(ts) && ts[j].t == d.Time[i]
		if d.Event[i] {
			c := &ts[j]
			res = (z - c.xbb) - risk*(z*(ch[j]+c.hOwn)-(cg[j]+c.gOwn))
		} else {
			hj, gj := ch[j], cg[j]
			if own {
				hj, gj = ch[j+1], cg[j+1]
			}
			res = -risk * (z*hj - gj)
		}
		ur[i] = d.varWeight(i) * res / info
	}
	of, k := clusters(nil, order)
	fit.Robust = interval(fit.HR, math.Sqrt(clusterVar(ur, of, k, order)), true)
	fit.Cluster = fit.Robust
	if d.Cluster != nil {
		of, k = clusters(d.Cluster, order)
		fit.Cluster = interval(fit.HR, math.Sqrt(clusterVar(ur, of, k, order)), true)
	}
	fit.PH = phCheck(d, order, ts, beta, ties)
	return fit, nil
}

// steps returns the Efron denominators' step count at one event time:
// d tied events for Efron, a single step carrying all of them for Breslow.
func (c *coxTime) steps(ties Ties) int {
	if ties == Breslow {
		return 1
	}
	return c.nd
}

// coxEval returns the weighted log partial likelihood, score and
// information at beta. With keep it also stores, per event time, the
// increments used by the score residuals: H = Σ_k m/den_k and
// G = Σ_k m x̄_k/den_k for rows at risk, and the same with the Efron
// factor (1 − (k−1)/d) for the tied event rows themselves.
func coxEval(ts []coxTime, beta float64, ties Ties, keep bool) (ll, u, info float64) {
	r := math.Exp(beta)
	for j := range ts {
		c := &ts[j]
		s0 := c.rw[0] + r*c.rw[1]
		s1 := r * c.rw[1]
		e0, e1 := c.dw[0], r*c.dw[1]
		dwt := c.dw[0] + c.dw[1]
		steps := c.steps(ties)
		mw := dwt / float64(steps) // mean weight per step
		ll += beta * c.dw[1]
		u += c.dw[1]
		var h, g, hx, gx, xs float64
		for k := 0; k < steps; k++ {
			f := 0.0
			if ties == Efron {
				f = float64(k) / float64(steps)
			}
			den := s0 - f*(e0+e1)
			xb := (s1 - f*e1) / den
			ll -= mw * math.Log(den)
			u -= mw * xb
			info += mw * xb * (1 - xb)
			xs += xb
			h += mw / den
			g += mw * xb / den
			hx += (1 - f) * mw / den
			gx += (1 - f) * mw * xb / den
		}
		if keep {
			c.h, c.g, c.hOwn, c.gOwn = h, g, hx, gx
			c.xbb = xs / float64(steps)
		}
	}
	return ll, u, info
}

// phCheck computes the cox.zph-style score test with the "km" transform.
func phCheck(d Data, order []int32, ts []coxTime, beta float64, ties Ties) PHCheck {
	// Unweighted pooled KM just before each event time: the product over
	// earlier event times of (1 − d/n), counts over both arms.
	n := len(order)
	atRisk := 0
	for i := range order {
		atRisk += d.rows(i)
	}
	s := 1.0
	j := 0
	sBefore := make([]float64, len(ts))
	for p := 0; p < n; {
		t := d.Time[order[p]]
		ev, all := 0, 0
		for p < n && d.Time[order[p]] == t {
			if d.Event[order[p]] {
				ev += d.rows(int(order[p]))
			}
			all += d.rows(int(order[p]))
			p++
		}
		if ev > 0 {
			sBefore[j] = s
			j++
			s *= 1 - float64(ev)/float64(atRisk)
		}
		atRisk -= all
	}
	// Centre on the mean over event rows (unweighted, as cox.zph does).
	mean, cnt := 0.0, 0
	for j := range ts {
		mean += float64(ts[j].nd) * (1 - sBefore[j])
		cnt += ts[j].nd
	}
	mean /= float64(cnt)
	r := math.Exp(beta)
	var uθ, ibb, ibθ, iθθ float64
	for j := range ts {
		c := &ts[j]
		g := 1 - sBefore[j] - mean
		s0 := c.rw[0] + r*c.rw[1]
		s1 := r * c.rw[1]
		e0, e1 := c.dw[0], r*c.dw[1]
		steps := c.steps(ties)
		mw := (c.dw[0] + c.dw[1]) / float64(steps)
		res := c.dw[1]
		v := 0.0
		for k := 0; k < steps; k++ {
			f := 0.0
			if ties == Efron {
				f = float64(k) / float64(steps)
			}
			xb := (s1 - f*e1) / (s0 - f*(e0+e1))
			res -= mw * xb
			v += mw * xb * (1 - xb)
		}
		uθ += g * res
		ibb += v
		ibθ += g * v
		iθθ += g * g * v
	}
	chi := uθ * uθ / (iθθ - ibθ*ibθ/ibb)
	return PHCheck{Transform: "km", ChiSq: chi, P: pChiSq1(chi)}
}
