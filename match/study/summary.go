package study

import (
	"time"

	"counterpart/match/balance"
	"counterpart/match/num"
)

// Summary is what a run reports: the JSON of --json, the runs row's JSON
// columns, and the source of the terminal summary. It never holds
// patient-level values.
type Summary struct {
	Study       string    `json:"study"`
	RunID       string    `json:"run_id"`
	Status      string    `json:"status"`
	Message     string    `json:"message,omitempty"`
	Engine      string    `json:"engine"`
	ToolVersion string    `json:"tool_version"`
	SpecSHA256  string    `json:"spec_sha256"`
	DryRun      bool      `json:"dry_run"`
	StartedAt   time.Time `json:"started_at"`
	FinishedAt  time.Time `json:"finished_at"`
	Fingerprint string    `json:"cohort_fingerprint,omitempty"`
	// Pooled lists the categorical covariates whose rare levels
	// cohort.rare_levels pooled.
	Pooled   []PooledLevels      `json:"pooled_levels,omitempty"`
	Counts   Counts              `json:"counts"`
	Model    ModelSummary        `json:"model"`
	Support  Support             `json:"support"`
	Matching *MatchingSummary    `json:"matching,omitempty"`
	Balance  []AdjustmentBalance `json:"balance"`
	Gate     Gate                `json:"gate"`
	Primary  string              `json:"headline_adjustment"`
	Estimand string              `json:"estimand"`
	Effects  []EffectRow         `json:"effects"`
	// Timings are each stage's own seconds: disjoint, so they sum to at
	// most the wall time (FinishedAt − StartedAt).
	Timings map[string]float64 `json:"stage_seconds"`
	// Overlapping are the seconds of work done beside the stages (the
	// cohort fingerprint's hash during the fit), apart from Timings.
	Overlapping map[string]float64 `json:"overlapping_seconds,omitempty"`
	// Stages lists every timed interval in the order it ended, with its
	// start from StartedAt: a stage paused by another (the warehouse-scale
	// balance sums inside publish) has several.
	Stages      []StageTime  `json:"stages,omitempty"`
	Diagnostics *Diagnostics `json:"diagnostics,omitempty"`
	// Survival holds the Kaplan–Meier curves of every time-to-event
	// outcome, arm and adjustment, on a grid.
	Survival []SurvivalCurve `json:"survival,omitempty"`
}

// StageTime is one interval of a stage on the run's clock.
type StageTime struct {
	Name string `json:"name"`
	// Start is the interval's start, in seconds after StartedAt.
	Start   float64 `json:"start"`
	Seconds float64 `json:"seconds"`
	// Overlaps marks work that ran beside the stages, not in their sum.
	Overlaps bool `json:"overlaps,omitempty"`
}

// Counts is the attrition of the run.
type Counts struct {
	Units          int `json:"units"`
	Treated        int `json:"treated"`
	Control        int `json:"control"`
	SupportTreated int `json:"in_support_treated"`
	SupportControl int `json:"in_support_control"`
	MatchedTreated int `json:"matched_treated"`
	MatchedControl int `json:"matched_control"`
}

// ModelSummary describes the propensity model.
type ModelSummary struct {
	Kind       string `json:"kind"`
	Terms      []Term `json:"terms"`
	Iterations int    `json:"iterations"`
	Converged  bool   `json:"converged"`
	LogLik     Num    `json:"log_likelihood"`
	NullLogLik Num    `json:"null_log_likelihood"`
	CStatistic Num    `json:"c_statistic"`
}

// Term is one model coefficient.
type Term struct {
	Name string `json:"term"`
	Coef Num    `json:"coef"`
	SE   Num    `json:"std_error"`
}

// Support is the common-support rule applied.
type Support struct {
	Rule    string `json:"rule"`
	Low     Num    `json:"ps_low"`
	High    Num    `json:"ps_high"`
	Dropped int    `json:"units_outside"`
}

// MatchingSummary describes the matched sets.
type MatchingSummary struct {
	Algorithm        string  `json:"algorithm"`
	Controls         int     `json:"controls_per_treated"`
	Reuse            bool    `json:"reuse"`
	CaliperSD        Num     `json:"caliper_sd"`
	LogitSD          Num     `json:"logit_pooled_sd"`
	CaliperWidth     Num     `json:"caliper_width"`
	Strata           int     `json:"exact_strata"`
	Sets             int     `json:"sets"`
	MatchedTreated   int     `json:"matched_treated"`
	UnmatchedTreated int     `json:"unmatched_treated"`
	MatchedControls  int     `json:"matched_controls"`
	TotalDistance    Num     `json:"total_distance"`
	Churn            *Churn  `json:"churn,omitempty"`
	Solver           *Solver `json:"solver,omitempty"`
}

// AdjustmentBalance is balance under one adjustment.
type AdjustmentBalance struct {
	Adjustment    string   `json:"adjustment"`
	Pass          bool     `json:"pass"`
	WorstSMD      Num      `json:"worst_abs_smd"`
	WorstVariable string   `json:"worst_variable"`
	Failures      []string `json:"failures,omitempty"`
	ESSTreated    Num      `json:"ess_treated"`
	ESSControl    Num      `json:"ess_control"`
	Stats         []Stat   `json:"variables"`
	// Score is the balance of logit(ps) itself (reported, not gated).
	Score *Stat `json:"score,omitempty"`
}

// Stat is one variable's balance row.
type Stat struct {
	Name     string `json:"covariate"`
	Level    string `json:"level,omitempty"`
	MeanT    Num    `json:"mean_treated"`
	MeanC    Num    `json:"mean_control"`
	SDT      Num    `json:"sd_treated"`
	SDC      Num    `json:"sd_control"`
	SMD      Num    `json:"smd"`
	VarRatio Num    `json:"variance_ratio"`
}

func toStats(st []balance.Stat) []Stat {
	out := make([]Stat, len(st))
	for i, s := range st {
		out[i] = Stat{Name: s.Name, Level: s.Level, MeanT: Num(s.MeanT), MeanC: Num(s.MeanC), SDT: Num(s.SDT), SDC: Num(s.SDC), SMD: Num(s.SMD), VarRatio: Num(s.VarRatio)}
	}
	return out
}

// Gate is the balance verdict that decides exit code 3.
type Gate struct {
	Adjustment    string `json:"adjustment"`
	Pass          bool   `json:"pass"`
	OnFail        string `json:"on_fail"`
	SMDLimit      Num    `json:"smd_limit"`
	VRLimit       Num    `json:"variance_ratio_limit"`
	WorstSMD      Num    `json:"worst_abs_smd"`
	WorstVariable string `json:"worst_variable"`
	Message       string `json:"message,omitempty"`
}

// EffectRow is one outcome under one adjustment.
type EffectRow struct {
	Outcome    string `json:"outcome"`
	Adjustment string `json:"adjustment"`
	Estimand   string `json:"estimand"`
	Contrast   string `json:"contrast"`
	Method     string `json:"se_method"`
	Estimate   Num    `json:"estimate"`
	SE         Num    `json:"std_error"`
	CILow      Num    `json:"ci_low"`
	CIHigh     Num    `json:"ci_high"`
	P          Num    `json:"p_value"`
	NTreated   int    `json:"n_treated"`
	NControl   int    `json:"n_control"`
	NMissing   int    `json:"n_missing_outcome"`
	// EValue and EValueCI: how strongly an unmeasured confounder would
	// have to be associated with treatment and outcome (risk-ratio scale)
	// to explain away the estimate and its confidence limit.
	EValue   Num `json:"e_value"`
	EValueCI Num `json:"e_value_ci"`
	// RosenbaumGamma: for matched pairs, the Γ at which the upper-bound
	// one-sided p-value first exceeds 0.05.
	RosenbaumGamma Num `json:"rosenbaum_gamma"`
	// Bootstrap (weighting estimators, when asked): SE and the percentile
	// 95% interval over BootReps replicates that refit the score.
	BootSE   Num `json:"bootstrap_se,omitempty"`
	BootLow  Num `json:"bootstrap_ci_low,omitempty"`
	BootHigh Num `json:"bootstrap_ci_high,omitempty"`
	BootReps int `json:"bootstrap_reps,omitempty"`
	// Horizon is the follow-up time a time-to-event row is read at
	// (survival and risk differences and ratios, RMST); nil otherwise.
	Horizon *Num `json:"horizon,omitempty"`
	// PH is the proportional-hazards check of a hazard-ratio row.
	PH *PHCheck `json:"ph_check,omitempty"`
}

// PHCheck is the Schoenfeld-residual score test of proportional hazards
// for the treatment effect (reported, not gating): chi-square with 1 df
// and its p-value, for the named time transform.
type PHCheck struct {
	Transform string `json:"transform"`
	ChiSq     Num    `json:"chi_square"`
	P         Num    `json:"p_value"`
}

// Num is a float64 that encodes NaN and ±Inf as JSON null instead of
// failing the whole summary.
type Num = num.Num

// The report's distribution pictures are computed in match/balance; the
// summary carries them under these names.
type (
	Diagnostics  = balance.Diagnostics
	ScoreDensity = balance.ScoreDensity
	ECDFCurve    = balance.ECDFCurve
	ECDFPanel    = balance.ECDFPanel
	ECDFDistance = balance.ECDFDistance
	NamedWeights = balance.NamedWeights
)
