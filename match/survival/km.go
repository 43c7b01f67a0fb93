package survival

import (
	"fmt"
	"math"
	"slices"
)

// Step is one row of a Kaplan–Meier table: a distinct follow-up time of the
// arm (an event or a censoring time, as R's survfit lists them).
type Step struct {
	Time float64
	// AtRisk, Events and Censored are weighted: at risk just before Time
	// (units censored at Time count as at risk), events and censorings at
	// Time.
	AtRisk, Events, Censored float64
	// NAtRisk, NEvents and NCensored are the same counts unweighted.
	NAtRisk, NEvents, NCensored int
	// Surv is S(Time), right-continuous. SE is its Greenwood-type standard
	// error with weighted counts,
	//
	//	SE = S(t)·√(Σ_{t_j ≤ t} d_j / (n_j (n_j − d_j))),
	//
	// as R survfit(weights = w, robust = FALSE) reports (summary std.err);
	// increments with n_j = d_j are taken as 0.
	Surv, SE float64
	// RobustSE is the infinitesimal-jackknife SE of S(Time), clustered
	// when clusters are given (R survfit(weights = w, robust = TRUE[,
	// cluster = c])); use it for the bands of weighted or matched curves.
	RobustSE float64
}

// Curve is one arm's Kaplan–Meier table.
type Curve struct {
	Treated bool
	Steps   []Step
}

// Horizon holds the horizon summaries of both arms (index 0 control,
// 1 treated) and their contrasts, treated minus (or over) control.
type Horizon struct {
	Time float64
	// Surv is S(H), Risk is 1 − S(H), RMST is ∫₀ᴴ S(u) du.
	Surv, Risk, RMST [2]Measure
	// SurvDiff = S₁(H) − S₀(H); RiskDiff = its negative; RMSTDiff likewise
	// treated − control; RiskRatio = (1 − S₁(H)) / (1 − S₀(H)), SEs on the
	// log scale.
	SurvDiff, RiskDiff, RMSTDiff, RiskRatio Measure
}

// KMResult is the output of KaplanMeier.
type KMResult struct {
	Curves   [2]Curve
	Horizons []Horizon
}

// kmArm holds one arm's step arrays plus the cumulative Greenwood sum
// A(t_j) = Σ_{k ≤ j} d_k / (n_k (n_k − d_k)).
type kmArm struct {
	t, n, d, s, a, cumA []float64
}

// KaplanMeier estimates the weighted Kaplan–Meier curve of each arm,
//
//	S(t) = Π_{t_j ≤ t} (1 − d_j / n_j)
//
// with d_j, n_j the weighted events and weighted number at risk at t_j
// (R survfit(Surv(t, e) ~ z, weights = w)), and at each horizon H reports
// survival, risk, RMST and the arm contrasts.
//
// Greenwood intervals use the weighted Greenwood formula (Step.SE) for S(H)
// and, for RMST, Var = Σ_{t_j ≤ H} B_j² d_j / (n_j (n_j − d_j)) with
// B_j = ∫_{t_j}^H S(u) du, which is what R's print(fit, rmean = H) reports as
// se(rmean); contrasts add the arms' variances (independent arms).
//
// Robust intervals use the infinitesimal jackknife: the derivative of the
// estimate with respect to each row's weight,
//
//	∂S(H)/∂w_i = −S(H) Σ_{t_j ≤ H} (dN_i(t_j) − Y_i(t_j) d_j/n_j) / (n_j − d_j),
//
// times w_i, summed within clusters and squared (R survfit(..., robust = TRUE,
// cluster = c); with non-integer weights R uses it by default). RMST's
// influence integrates that of S over [0, H]. Because a cluster may hold
// rows of both arms, contrasts sum each cluster's influence across arms
// before squaring, which carries the covariance between the arms.
//
// A horizon must be > 0 and no later than the last follow-up time of
// either arm.
func KaplanMeier(d Data, horizons []float64) (KMResult, error) {
	if err := d.validate(); err != nil {
		return KMResult{}, fmt.Errorf("kaplan-meier: %w", err)
	}
	d, err := d.dropZeroWeights()
	if err != nil {
		return KMResult{}, fmt.Errorf("kaplan-meier: %w", err)
	}
	order := d.canonical()
	pos := make([]int32, len(d.Time)) // row → its step in its arm
	var arms [2]kmArm
	var res KMResult
	for a := range res.Curves {
		res.Curves[a].Treated = a == 1
	}
	for _, i := range order {
		a := b2i(d.Treated[i])
		c := &res.Curves[a]
		t := d.Time[i]
		if len(c.Steps) == 0 || c.Steps[len(c.Steps)-1].Time != t {
			c.Steps = append(c.Steps, Step{Time: t})
		}
		st := &c.Steps[len(c.Steps)-1]
		w := d.weight(int(i))
		if d.Event[i] {
			st.Events += w
			st.NEvents += d.rows(int(i))
		} else {
			st.Censored += w
			st.NCensored += d.rows(int(i))
		}
		pos[i] = int32(len(c.Steps) - 1)
	}
	for a := range arms {
		steps := res.Curves[a].Steps
		k := len(steps)
		ar := kmArm{t: make([]float64, k), n: make([]float64, k), d: make([]float64, k),
			s: make([]float64, k), a: make([]float64, k), cumA: make([]float64, k)}
		var n float64
		var nn int
		for j := k - 1; j >= 0; j-- {
			n += steps[j].Events + steps[j].Censored
			nn += steps[j].NEvents + steps[j].NCensored
			steps[j].AtRisk, steps[j].NAtRisk = n, nn
		}
		s, cum := 1.0, 0.0
		for j := range steps {
			st := &steps[j]
			ar.t[j], ar.n[j], ar.d[j] = st.Time, st.AtRisk, st.Events
			if st.Events > 0 {
				s *= 1 - st.Events/st.AtRisk
				if st.AtRisk > st.Events {
					ar.a[j] = st.Events / (st.AtRisk * (st.AtRisk - st.Events))
				}
			}
			if s < 0 { // rounding when every unit at risk has the event
				s = 0
			}
			cum += ar.a[j]
			ar.s[j], ar.cumA[j] = s, cum
			st.Surv, st.SE = s, s*math.Sqrt(cum)
		}
		arms[a] = ar
	}
	// The variance passes read the rows in canonical order many times; a
	// copy laid out in that order makes each pass sequential in memory.
	of, k := clusters(d.Cluster, order)
	n := len(order)
	sd := Data{Time: make([]float64, n), Event: make([]bool, n), Treated: make([]bool, n), Weight: make([]float64, n)}
	spos, sof, ident := make([]int32, n), make([]int32, n), make([]int32, n)
	for p, i := range order {
		sd.Time[p], sd.Event[p], sd.Treated[p] = d.Time[i], d.Event[i], d.Treated[i]
		sd.Weight[p] = d.varWeight(int(i))
		spos[p], sof[p], ident[p] = pos[i], of[i], int32(p)
	}
	robustSteps(sd, &res, &arms, spos, ident, sof, k)
	last := math.Min(arms[0].t[len(arms[0].t)-1], arms[1].t[len(arms[1].t)-1])
	for _, h := range horizons {
		if !(h > 0) || h > last {
			beyond := 0
			for i, t := range d.Time {
				if t < h {
					beyond += d.rows(i)
				}
			}
			return KMResult{}, fmt.Errorf("kaplan-meier: horizon %v is not within follow-up (0, %v], the last time both arms are followed; %d units have follow-up ending before it", h, last, beyond)
		}
		res.Horizons = append(res.Horizons, horizon(sd, &arms, spos, ident, sof, k, h))
	}
	return res, nil
}

// robustSteps sets Step.RobustSE for every step of both arms in one sweep
// over time. A cluster c's summed weighted influence on log S(t)/−1 is
//
//	X_c(t) = P_c(t) − A(t)·Q_c(t),
//
// P_c the sum of w_i·K_i over its rows with t_i ≤ t (K_i = [event]/(n_m −
// d_m) − A(t_m), the row's constant influence once it has left the risk
// set), Q_c the weight of its rows still at risk after t. So
// Var S(t) = S(t)²·(ΣP² − 2A·ΣPQ + A²·ΣQ²), and the three sums change only
// where one of the cluster's rows leaves: O(n) in all instead of
// O(n × steps).
func robustSteps(d Data, res *KMResult, arms *[2]kmArm, pos, order, of []int32, k int) {
	p, q := make([]float64, 2*k), make([]float64, 2*k)
	var pp, pq, qq [2]float64
	for _, i := range order {
		q[b2i(d.Treated[i])*k+int(of[i])] += d.varWeight(int(i))
	}
	for c, v := range q {
		qq[c/k] += v * v
	}
	n := len(order)
	for at := 0; at < n; {
		t := d.Time[order[at]]
		step := [2]int{-1, -1}
		for ; at < n && d.Time[order[at]] == t; at++ {
			i := order[at]
			a := b2i(d.Treated[i])
			ar := &arms[a]
			m := int(pos[i])
			kk := -ar.cumA[m]
			if d.Event[i] {
				if free := ar.n[m] - ar.d[m]; free > 0 {
					kk += 1 / free
				} else {
					kk = 0 // S is 0 from here on; its SE is 0
				}
			}
			w := d.varWeight(int(i))
			c := a*k + int(of[i])
			pp[a] -= p[c] * p[c]
			pq[a] -= p[c] * q[c]
			qq[a] -= q[c] * q[c]
			p[c] += w * kk
			q[c] -= w
			pp[a] += p[c] * p[c]
			pq[a] += p[c] * q[c]
			qq[a] += q[c] * q[c]
			step[a] = m
		}
		for a, m := range step {
			if m < 0 {
				continue
			}
			ar := &arms[a]
			st := &res.Curves[a].Steps[m]
			if ar.s[m] > 0 {
				A := ar.cumA[m]
				st.RobustSE = ar.s[m] * math.Sqrt(math.Max(0, pp[a]-2*A*pq[a]+A*A*qq[a]))
			}
		}
	}
}

// horizon computes the summaries at one horizon h.
func horizon(d Data, arms *[2]kmArm, pos, order, of []int32, k int, h float64) Horizon {
	out := Horizon{Time: h}
	var sh, rm, varS, varR [2]float64
	var bAt, abCum [2][]float64 // B_j per step; Σ_{i ≤ j} a_i B_i
	for a := range arms {
		ar := &arms[a]
		m := len(ar.t)
		j := lastAtOrBefore(ar.t, h)
		sh[a] = 1
		if j >= 0 {
			sh[a] = ar.s[j]
			varS[a] = sh[a] * sh[a] * ar.cumA[j]
		}
		// B_i = ∫_{t_i}^h S(u) du, accumulated backwards over steps ≤ h.
		b := make([]float64, m)
		acc := 0.0
		for i := j; i >= 0; i-- {
			right := h
			if i < j {
				right = ar.t[i+1]
			}
			acc += ar.s[i] * (right - ar.t[i])
			b[i] = acc
		}
		first := h // S = 1 on [0, t_1)
		if m > 0 && ar.t[0] < h {
			first = ar.t[0]
		}
		rm[a] = first + acc
		cum := make([]float64, m)
		c := 0.0
		for i := 0; i < m; i++ {
			if i <= j {
				c += ar.a[i] * b[i]
				varR[a] += b[i] * b[i] * ar.a[i]
			}
			cum[i] = c
		}
		bAt[a], abCum[a] = b, cum
	}
	// Weighted influence of each row on S_a(h) and RMST_a(h), accumulated
	// per cluster in one pass over the canonical order. The contrasts sum
	// treated rows' influence with +, control rows' with −, so a cluster's
	// sum carries both arms and their covariance.
	const (
		qS0 = iota // S₀(h)
		qS1        // S₁(h)
		qR0        // RMST₀(h)
		qR1        // RMST₁(h)
		qD         // S₁ − S₀
		qDR        // RMST₁ − RMST₀
		qL         // log((1 − S₁)/(1 − S₀))
		nq
	)
	var jh [2]int
	for a := range arms {
		jh[a] = lastAtOrBefore(arms[a].t, h)
	}
	acc := make([]float64, k*nq)
	for _, i := range order {
		a := b2i(d.Treated[i])
		ar := &arms[a]
		m := int(pos[i])
		w := d.varWeight(int(i)) // the row weight; √Σw² for a group
		tm := ar.t[m]
		free := ar.n[m] - ar.d[m] // weighted survivors of the row's step
		jm := m
		if tm > h {
			jm = jh[a]
		}
		// S(h): −S(h)·C_i, C_i = [event, t_m ≤ h]/(n_m − d_m) − A(min(h, t_m)).
		var uS float64
		if sh[a] > 0 {
			c := 0.0
			if jm >= 0 {
				c = -ar.cumA[jm]
			}
			if d.Event[i] && tm <= h {
				c += 1 / free
			}
			uS = -w * sh[a] * c
		}
		// RMST: Σ_{t_k ≤ min(h, t_m)} a_k B_k − [event, t_m < h]·B_m/(n_m − d_m).
		uR := 0.0
		if jm >= 0 {
			uR = abCum[a][jm]
		}
		if d.Event[i] && tm < h && free > 0 {
			uR -= bAt[a][m] / free
		}
		uR *= w
		c := acc[int(of[i])*nq : int(of[i])*nq+nq]
		if a == 1 {
			c[qS1] += uS
			c[qR1] += uR
			c[qD] += uS
			c[qDR] += uR
			c[qL] -= uS / (1 - sh[1])
		} else {
			c[qS0] += uS
			c[qR0] += uR
			c[qD] -= uS
			c[qDR] -= uR
			c[qL] += uS / (1 - sh[0])
		}
	}
	var v [nq]float64
	for c := 0; c < k; c++ {
		for q := 0; q < nq; q++ {
			x := acc[c*nq+q]
			v[q] += x * x
		}
	}
	for a := 0; a < 2; a++ {
		rs, rr := math.Sqrt(v[qS0+a]), math.Sqrt(v[qR0+a])
		out.Surv[a] = Measure{Value: sh[a], Greenwood: interval(sh[a], math.Sqrt(varS[a]), false), Robust: interval(sh[a], rs, false)}
		out.Risk[a] = Measure{Value: 1 - sh[a], Greenwood: interval(1-sh[a], math.Sqrt(varS[a]), false), Robust: interval(1-sh[a], rs, false)}
		out.RMST[a] = Measure{Value: rm[a], Greenwood: interval(rm[a], math.Sqrt(varR[a]), false), Robust: interval(rm[a], rr, false)}
	}
	sd := sh[1] - sh[0]
	seD := math.Sqrt(varS[0] + varS[1])
	rseD := math.Sqrt(v[qD])
	out.SurvDiff = Measure{Value: sd, Greenwood: interval(sd, seD, false), Robust: interval(sd, rseD, false)}
	out.RiskDiff = Measure{Value: -sd, Greenwood: interval(-sd, seD, false), Robust: interval(-sd, rseD, false)}
	rd := rm[1] - rm[0]
	out.RMSTDiff = Measure{Value: rd, Greenwood: interval(rd, math.Sqrt(varR[0]+varR[1]), false),
		Robust: interval(rd, math.Sqrt(v[qDR]), false)}
	r1, r0 := 1-sh[1], 1-sh[0]
	ratio := r1 / r0
	seL := math.Sqrt(varS[1]/(r1*r1) + varS[0]/(r0*r0))
	out.RiskRatio = Measure{Value: ratio, Ratio: true, Greenwood: interval(ratio, seL, true),
		Robust: interval(ratio, math.Sqrt(v[qL]), true)}
	return out
}

// lastAtOrBefore returns the index of the last t ≤ x in ascending t, or −1.
func lastAtOrBefore(t []float64, x float64) int {
	j, found := slices.BinarySearch(t, x)
	if found {
		return j
	}
	return j - 1
}
