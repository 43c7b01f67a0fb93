package study

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"net/url"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"strings"

	"go.yaml.in/yaml/v3"

	"counterpart/match/balance"
	"counterpart/match/score"
	"counterpart/match/weights"
	"counterpart/warehouse"
)

// Spec is a parsed and validated study file. Field tags are the study
// file's keys; README.md documents each one.
type Spec struct {
	Study     string        `yaml:"study" json:"study"`
	Warehouse WarehouseSpec `yaml:"warehouse" json:"warehouse"`
	Cohort    CohortSpec    `yaml:"cohort" json:"cohort"`
	Score     ScoreSpec     `yaml:"score" json:"score"`
	Support   string        `yaml:"support" json:"support"`
	Matching  MatchingSpec  `yaml:"matching" json:"matching"`
	Weighting []string      `yaml:"weighting" json:"weighting"`
	Rules     WeightRules   `yaml:"weight_rules" json:"weight_rules"`
	Balance   BalanceSpec   `yaml:"balance" json:"balance"`
	Estimate  EstimateSpec  `yaml:"estimate" json:"estimate"`
	Output    OutputSpec    `yaml:"output" json:"output"`

	// Path is the study file's path, for messages.
	Path string `yaml:"-" json:"-"`
	// SHA256 is the hex digest of the study file's bytes.
	SHA256 string `yaml:"-" json:"-"`
}

// WarehouseSpec says which warehouse to open.
type WarehouseSpec struct {
	Engine string `yaml:"engine" json:"engine"`
	DSN    string `yaml:"dsn" json:"dsn"`
	// ExternalAccess false keeps the cohort query (and every statement of
	// the run) from reading files and URLs of the host: DuckDB's
	// enable_external_access. Absent means true: reading Parquet and CSV
	// is what most studies want.
	ExternalAccess *bool `yaml:"external_access" json:"external_access,omitempty"`
}

// NoExternalAccess says warehouse.external_access is false.
func (w WarehouseSpec) NoExternalAccess() bool { return w.ExternalAccess != nil && !*w.ExternalAccess }

// CohortSpec says how to read the cohort.
type CohortSpec struct {
	SQL         string   `yaml:"sql" json:"sql"`
	Unit        string   `yaml:"unit" json:"unit"`
	Treatment   string   `yaml:"treatment" json:"treatment"`
	Outcomes    []string `yaml:"outcomes" json:"outcomes"`
	Covariates  []string `yaml:"covariates" json:"covariates"`
	Categorical []string `yaml:"categorical" json:"categorical"`
	// MaxLevels bounds a categorical covariate's levels (0: the default,
	// DefaultMaxLevels); see checkWidth for the rule with the cohort's size.
	MaxLevels int `yaml:"max_levels" json:"max_levels,omitempty"`
	// RareLevels, when above 0, pools the levels of every categorical
	// covariate held by fewer than RareLevels units into one level of
	// their own, RareLevel, before anything else sees the cohort.
	RareLevels int `yaml:"rare_levels" json:"rare_levels,omitempty"`
	// TimeToEvent lists outcomes that are a time to an event under
	// censoring; Rates lists event counts over unequal exposure.
	TimeToEvent []TimeToEventSpec `yaml:"time_to_event" json:"time_to_event,omitempty"`
	Rates       []RateSpec        `yaml:"rates" json:"rates,omitempty"`
	// PartitionColumn names a column of the query's result on which the
	// cohort's table is partitioned across the nodes of a distributed
	// engine. Warehouse-scale passes then sum per partition value first,
	// which lets a coordinator send each partition's aggregate to the
	// node holding it (see README, sharded warehouses). It changes no
	// result; in memory (score.fit_in: memory) the rows are read once
	// and it is not used.
	PartitionColumn string `yaml:"partition_column" json:"partition_column,omitempty"`
}

// TimeToEventSpec is one time-to-event outcome: follow-up time (> 0) and
// whether it ended in the event (1) or in censoring (0).
type TimeToEventSpec struct {
	// Name is the outcome's name in every table.
	Name  string `yaml:"name" json:"name"`
	Time  string `yaml:"time" json:"time"`
	Event string `yaml:"event" json:"event"`
	// Horizons are the fixed times (in Time's unit) at which risks and
	// restricted mean times are reported, increasing.
	Horizons []float64 `yaml:"horizons" json:"horizons"`
}

// RateSpec is one rate outcome: a non-negative event count over an
// exposure (> 0, e.g. member-months).
type RateSpec struct {
	Name     string `yaml:"name" json:"name"`
	Count    string `yaml:"count" json:"count"`
	Exposure string `yaml:"exposure" json:"exposure"`
}

// ReadColumns lists the outcome-like columns the reader must fetch: the
// plain outcomes, then each time-to-event outcome's time and event and
// each rate's count and exposure.
func (c *CohortSpec) ReadColumns() []string {
	out := append([]string(nil), c.Outcomes...)
	for _, t := range c.TimeToEvent {
		out = append(out, t.Time, t.Event)
	}
	for _, r := range c.Rates {
		out = append(out, r.Count, r.Exposure)
	}
	return out
}

// ScoreSpec configures the propensity model.
type ScoreSpec struct {
	Model   string  `yaml:"model" json:"model"`
	Lambda  float64 `yaml:"lambda" json:"lambda"`
	MaxIter int     `yaml:"max_iter" json:"max_iter"`
	// MaxTerms bounds the model's columns, intercept excluded (0: the
	// default, DefaultMaxTerms).
	MaxTerms int `yaml:"max_terms" json:"max_terms,omitempty"`
	// FitIn says where the model is fitted and the per-unit rows are
	// computed: "memory" (the default) reads the cohort into the
	// process; "warehouse" fits with one aggregate query per Newton step
	// and has the engine write scores, weights and the cohort snapshot
	// itself, so the covariate matrix never leaves the engine (the engine
	// must implement warehouse.InWarehouse).
	FitIn string `yaml:"fit_in" json:"fit_in"`
}

// MatchingSpec configures matching.
type MatchingSpec struct {
	Algorithm string   `yaml:"algorithm" json:"algorithm"`
	Controls  int      `yaml:"controls" json:"controls"`
	Reuse     bool     `yaml:"reuse" json:"reuse"`
	Caliper   float64  `yaml:"caliper" json:"caliper"`
	ExactOn   []string `yaml:"exact_on" json:"exact_on"`
	Order     string   `yaml:"order" json:"order"`
	Seed      uint64   `yaml:"seed" json:"seed"`
	// KeepPrior keeps the last published run's sets that still hold and
	// matches only new or freed units.
	KeepPrior bool `yaml:"keep_prior" json:"keep_prior"`
	// MaxControls and MaxTreated bound full matching's sets: at most
	// MaxControls controls per treated unit and MaxTreated treated units
	// per control (0: no bound).
	MaxControls int `yaml:"max_controls" json:"max_controls,omitempty"`
	MaxTreated  int `yaml:"max_treated" json:"max_treated,omitempty"`
	// Subclasses is the number of propensity-score subclasses of
	// algorithm strata (0: 5, Cochran 1968).
	Subclasses int `yaml:"subclasses" json:"subclasses,omitempty"`
	// Distance ranks the comparison units inside the caliper: logit
	// (|difference of logit(ps)|, the default), mahalanobis or
	// rank_mahalanobis on the DistanceOn covariates. The caliper on
	// logit(ps) still decides which pairs may match (Rosenbaum & Rubin
	// 1985, Am Stat 39:33).
	Distance string `yaml:"distance" json:"distance"`
	// DistanceOn lists the covariates of a Mahalanobis distance (empty:
	// every numeric covariate); categorical ones enter as indicators of
	// their non-reference levels.
	DistanceOn []string `yaml:"distance_on" json:"distance_on,omitempty"`
}

// BalanceSpec is the balance gate.
type BalanceSpec struct {
	SMDLimit           float64 `yaml:"smd_limit" json:"smd_limit"`
	VarianceRatioLimit float64 `yaml:"variance_ratio_limit" json:"variance_ratio_limit"`
	OnFail             string  `yaml:"on_fail" json:"on_fail"`
}

// WeightRules adjust every weighting scheme after it is computed.
type WeightRules struct {
	// Stabilize multiplies weights by the share of the unit's own arm
	// (Robins, Hernán & Brumback 2000).
	Stabilize bool `yaml:"stabilize" json:"stabilize"`
	// Percentiles winsorises positive weights within each arm at these
	// percentiles, e.g. [1, 99]; empty means none.
	Percentiles []float64 `yaml:"percentiles" json:"percentiles,omitempty"`
	// Bounds clamps positive weights to [low, high]; empty means none.
	Bounds []float64 `yaml:"bounds" json:"bounds,omitempty"`
}

// EstimateSpec picks the headline estimand and the extra estimators.
type EstimateSpec struct {
	Estimand string `yaml:"estimand" json:"estimand"`
	// Augment adds, for each adjustment, the weighted regression of the
	// outcome on treatment and the covariates (doubly robust).
	Augment bool `yaml:"augment" json:"augment"`
	// Bootstrap is the number of bootstrap replicates for the weighting
	// estimators (0: none); each replicate refits the score.
	Bootstrap int `yaml:"bootstrap" json:"bootstrap"`
	// Seed seeds the bootstrap.
	Seed uint64 `yaml:"seed" json:"seed"`
}

// OutputSpec says where results are written.
type OutputSpec struct {
	Schema   string `yaml:"schema" json:"schema"`
	Prefix   string `yaml:"prefix" json:"prefix"`
	KeepRuns int    `yaml:"keep_runs" json:"keep_runs"`
	// KeepFailedDays is how many days the rows of runs that did not
	// succeed (failed, rejected, cancelled, abandoned, skipped) are kept;
	// keep_runs counts succeeded runs only. 0 keeps them all.
	KeepFailedDays int `yaml:"keep_failed_days" json:"keep_failed_days"`
	// Report, when set, is an HTML report file written after every run
	// (relative paths are relative to the study file).
	Report string `yaml:"report" json:"report,omitempty"`
}

// SpecError is a problem with the study file. Line is 0 when the problem
// is not tied to one line.
type SpecError struct {
	Path string
	Line int
	Msg  string
}

func (e *SpecError) Error() string {
	if e.Line > 0 {
		return fmt.Sprintf("%s:%d: %s", e.Path, e.Line, e.Msg)
	}
	return fmt.Sprintf("%s: %s", e.Path, e.Msg)
}

// Unwrap classes a spec error as bad input (exit 2).
func (e *SpecError) Unwrap() error { return warehouse.ErrBadInput }

// Defaults applied when a key is absent.
const (
	DefaultCaliper  = 0.2
	DefaultSeed     = 20261201
	DefaultKeepRuns = 30
	// DefaultKeepFailedDays keeps a month of failures to look into.
	DefaultKeepFailedDays = 30
)

// Known values of the enumerated keys.
var (
	models     = []string{"logistic", "ridge"}
	fitIns     = []string{"memory", "warehouse"}
	supports   = score.SupportRules
	algorithms = []string{"greedy", "optimal", "full", "strata", "off"}
	orders     = []string{"high-score-first", "low-score-first", "random", "unit"}
	distances  = []string{"logit", "mahalanobis", "rank_mahalanobis"}
	schemes    = weights.Names()
	onFails    = []string{"reject", "warn"}
	estimands  = []string{"att", "ate", "atc", "ato", "atm"}
	studyName  = regexp.MustCompile(`^[a-z][a-z0-9_]*$`)
	envRef     = regexp.MustCompile(`\$\{([A-Za-z_][A-Za-z0-9_]*)\}`)
)

// Load reads, expands and validates a study file.
func Load(path string) (*Spec, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, &SpecError{Path: path, Msg: fmt.Sprintf("cannot read the study file (%v)", unwrapPathErr(err))}
	}
	s, err := Parse(path, b, os.LookupEnv)
	if err != nil {
		return nil, err
	}
	// The engine says how a DSN given in a study file is read (a DuckDB
	// file named relative to it is found beside it).
	if e, ok := warehouse.Lookup(s.Warehouse.Engine); ok && e.ResolveDSN != nil {
		s.Warehouse.DSN = e.ResolveDSN(s.Warehouse.DSN, filepath.Dir(path))
	}
	if s.Output.Report != "" && !filepath.IsAbs(s.Output.Report) {
		s.Output.Report = filepath.Join(filepath.Dir(path), s.Output.Report)
	}
	return s, nil
}

func unwrapPathErr(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}

// Parse parses study file bytes; lookup resolves ${VAR} references (nil
// means none are set). Unknown keys, wrong types and out-of-range values
// are errors naming the key and its line.
func Parse(path string, b []byte, lookup func(string) (string, bool)) (*Spec, error) {
	sum := sha256.Sum256(b)
	var root yaml.Node
	dec := yaml.NewDecoder(bytes.NewReader(b))
	if err := dec.Decode(&root); err != nil {
		if errors.Is(err, io.EOF) {
			return nil, &SpecError{Path: path, Msg: "the study file is empty; see README.md for a template"}
		}
		return nil, yamlError(path, err)
	}
	if root.Kind == 0 || len(root.Content) == 0 {
		return nil, &SpecError{Path: path, Msg: "the study file is empty; see README.md for a template"}
	}
	doc := root.Content[0]
	if err := checkKeys(path, doc, reflect.TypeOf(Spec{}), ""); err != nil {
		return nil, err
	}
	if err := expandEnv(path, doc, lookup); err != nil {
		return nil, err
	}
	s := &Spec{Matching: MatchingSpec{Caliper: math.NaN()}, Output: OutputSpec{KeepRuns: -1, KeepFailedDays: -1}}
	if err := doc.Decode(s); err != nil {
		return nil, yamlError(path, err)
	}
	s.Path = path
	s.SHA256 = hex.EncodeToString(sum[:])
	if err := s.validate(doc); err != nil {
		return nil, err
	}
	return s, nil
}

var yamlLine = regexp.MustCompile(`line (\d+): (.*)`)

// yamlError turns the YAML library's (sometimes multi-line) errors into one
// line with the file and line number.
func yamlError(path string, err error) error {
	msg := err.Error()
	msg = strings.TrimPrefix(msg, "yaml: ")
	msg = strings.TrimPrefix(msg, "unmarshal errors:\n")
	msg = strings.TrimSpace(strings.SplitN(msg, "\n", 2)[0])
	if m := yamlLine.FindStringSubmatch(msg); m != nil {
		var line int
		fmt.Sscan(m[1], &line)
		detail := m[2]
		detail = strings.ReplaceAll(detail, "!!str", "text")
		detail = strings.ReplaceAll(detail, "!!int", "a number")
		detail = strings.ReplaceAll(detail, "!!seq", "a list")
		detail = strings.ReplaceAll(detail, "!!map", "a mapping")
		return &SpecError{Path: path, Line: line, Msg: "invalid value: " + detail}
	}
	return &SpecError{Path: path, Msg: "not valid YAML: " + msg}
}

// checkKeys walks a mapping node against the struct type t and reports the
// first unknown or repeated key with its line and the nearest known key.
func checkKeys(path string, n *yaml.Node, t reflect.Type, where string) error {
	if n.Kind != yaml.MappingNode {
		if n.Kind == yaml.ScalarNode && n.Tag == "!!null" {
			return nil
		}
		what := "the study file"
		if where != "" {
			what = where
		}
		return &SpecError{Path: path, Line: n.Line, Msg: fmt.Sprintf("%s must be a mapping of keys to values", what)}
	}
	fields := map[string]reflect.StructField{}
	var names []string
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		tag := strings.Split(f.Tag.Get("yaml"), ",")[0]
		if tag == "" || tag == "-" {
			continue
		}
		fields[tag] = f
		names = append(names, tag)
	}
	seen := map[string]bool{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, v := n.Content[i], n.Content[i+1]
		key := k.Value
		full := key
		if where != "" {
			full = where + "." + key
		}
		f, ok := fields[key]
		if !ok {
			msg := fmt.Sprintf("unknown key %q", full)
			if s := nearest(key, names); s != "" {
				msg += fmt.Sprintf(" (did you mean %q?)", s)
			} else {
				msg += fmt.Sprintf(" (known keys here: %s)", strings.Join(names, ", "))
			}
			return &SpecError{Path: path, Line: k.Line, Msg: msg}
		}
		if seen[key] {
			return &SpecError{Path: path, Line: k.Line, Msg: fmt.Sprintf("key %q is given twice", full)}
		}
		seen[key] = true
		if f.Type.Kind() == reflect.Struct {
			if err := checkKeys(path, v, f.Type, full); err != nil {
				return err
			}
		}
	}
	return nil
}

// nearest returns the known name closest to s by edit distance when it is
// close enough to be a plausible typo.
func nearest(s string, names []string) string {
	best, bestD := "", 1<<30
	for _, n := range names {
		if d := editDistance(s, n); d < bestD {
			best, bestD = n, d
		}
	}
	if bestD <= 2 || (bestD <= len(s)/3 && bestD <= 4) {
		return best
	}
	return ""
}

func editDistance(a, b string) int {
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			c := 1
			if a[i-1] == b[j-1] {
				c = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+c)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}

// expandEnv replaces ${VAR} in every scalar value. An unset variable is an
// error naming it and the line, never a silent empty string.
func expandEnv(path string, n *yaml.Node, lookup func(string) (string, bool)) error {
	if n.Kind == yaml.ScalarNode && strings.Contains(n.Value, "${") {
		var missing string
		n.Value = envRef.ReplaceAllStringFunc(n.Value, func(ref string) string {
			name := envRef.FindStringSubmatch(ref)[1]
			if lookup != nil {
				if v, ok := lookup(name); ok {
					return v
				}
			}
			if missing == "" {
				missing = name
			}
			return ""
		})
		if missing != "" {
			return &SpecError{Path: path, Line: n.Line, Msg: fmt.Sprintf("environment variable %s is not set (referenced as ${%s}); export it before the run", missing, missing)}
		}
	}
	for _, c := range n.Content {
		if err := expandEnv(path, c, lookup); err != nil {
			return err
		}
	}
	return nil
}

// lineOf finds the line of a dotted key path in the document, for messages
// about values that decoded but are out of range.
func lineOf(doc *yaml.Node, dotted string) int {
	n := doc
	line := 0
	for _, part := range strings.Split(dotted, ".") {
		if n == nil || n.Kind != yaml.MappingNode {
			return line
		}
		var next *yaml.Node
		for i := 0; i+1 < len(n.Content); i += 2 {
			if n.Content[i].Value == part {
				line = n.Content[i].Line
				next = n.Content[i+1]
			}
		}
		if next == nil {
			return line
		}
		n = next
	}
	return line
}

// present reports whether a dotted key is written in the document, so a
// default applies only to keys the analyst left out.
func present(doc *yaml.Node, dotted string) bool {
	n := doc
	for _, part := range strings.Split(dotted, ".") {
		if n == nil || n.Kind != yaml.MappingNode {
			return false
		}
		var next *yaml.Node
		for i := 0; i+1 < len(n.Content); i += 2 {
			if n.Content[i].Value == part {
				next = n.Content[i+1]
			}
		}
		if next == nil {
			return false
		}
		n = next
	}
	return true
}

func oneOf(v string, allowed []string) bool {
	for _, a := range allowed {
		if v == a {
			return true
		}
	}
	return false
}

func (s *Spec) validate(doc *yaml.Node) error {
	bad := func(key, format string, args ...any) error {
		return &SpecError{Path: s.Path, Line: lineOf(doc, key), Msg: key + ": " + fmt.Sprintf(format, args...)}
	}
	enum := func(key string, v *string, def string, allowed []string) error {
		if *v == "" {
			*v = def
		}
		if !oneOf(*v, allowed) {
			return bad(key, "%q is not one of %s", *v, strings.Join(allowed, " | "))
		}
		return nil
	}
	if s.Study == "" {
		return bad("study", "missing; give the study a name like hf_coaching ([a-z][a-z0-9_]*)")
	}
	if !studyName.MatchString(s.Study) || len(s.Study) > 40 {
		return bad("study", "%q is not a valid name; use lower-case letters, digits and _ (start with a letter, at most 40)", s.Study)
	}
	engines, defaultEngine := warehouse.EngineNames()
	if err := enum("warehouse.engine", &s.Warehouse.Engine, defaultEngine, engines); err != nil {
		return err
	}
	if s.Warehouse.DSN == "" {
		var hints []string
		for _, e := range warehouse.Engines() {
			hints = append(hints, e.DSNHint)
		}
		return bad("warehouse.dsn", "missing; give %s", strings.Join(hints, " or "))
	}
	c := &s.Cohort
	if strings.TrimSpace(c.SQL) == "" {
		return bad("cohort.sql", "missing; give the query that returns one row per unit")
	}
	for _, k := range []struct{ key, v string }{{"cohort.unit", c.Unit}, {"cohort.treatment", c.Treatment}} {
		if k.v == "" {
			return bad(k.key, "missing; name a column of the cohort query")
		}
		if err := warehouse.ValidIdent(k.v); err != nil {
			return bad(k.key, "%v", err)
		}
	}
	if len(c.Covariates) == 0 {
		return bad("cohort.covariates", "missing; list the columns the propensity model uses")
	}
	used := map[string]string{c.Unit: "cohort.unit"}
	if prev, ok := used[c.Treatment]; ok {
		return bad("cohort.treatment", "column %q is already used as %s", c.Treatment, prev)
	}
	used[c.Treatment] = "cohort.treatment"
	for _, group := range []struct {
		key  string
		cols []string
	}{{"cohort.covariates", c.Covariates}, {"cohort.outcomes", c.Outcomes}} {
		for _, col := range group.cols {
			if err := warehouse.ValidIdent(col); err != nil {
				return bad(group.key, "%v", err)
			}
			if prev, ok := used[col]; ok {
				return bad(group.key, "column %q is already used as %s", col, prev)
			}
			used[col] = group.key
		}
	}
	if err := c.validateKinds(used, bad); err != nil {
		return err
	}
	for _, col := range c.Categorical {
		if used[col] != "cohort.covariates" {
			return bad("cohort.categorical", "%q is not listed in cohort.covariates", col)
		}
	}
	if c.PartitionColumn != "" {
		if err := warehouse.ValidIdent(c.PartitionColumn); err != nil {
			return bad("cohort.partition_column", "%v", err)
		}
	}
	if err := enum("score.model", &s.Score.Model, "logistic", models); err != nil {
		return err
	}
	if s.Score.Lambda < 0 || math.IsNaN(s.Score.Lambda) {
		return bad("score.lambda", "must be >= 0 (0 picks the default penalty)")
	}
	if s.Score.Lambda > 0 && s.Score.Model != "ridge" {
		return bad("score.lambda", "only applies to score.model: ridge")
	}
	if s.Score.MaxIter < 0 {
		return bad("score.max_iter", "must be >= 0 (0 picks the default, 50)")
	}
	if s.Score.MaxTerms < 0 {
		return bad("score.max_terms", "must be >= 0 (0 picks the default, %d)", DefaultMaxTerms)
	}
	if s.Cohort.MaxLevels < 0 {
		return bad("cohort.max_levels", "must be >= 0 (0 picks the default, %d)", DefaultMaxLevels)
	}
	if s.Cohort.RareLevels < 0 {
		return bad("cohort.rare_levels", "must be >= 0 units (0 pools nothing)")
	}
	if err := enum("support", &s.Support, "none", supports); err != nil {
		return err
	}
	if err := enum("score.fit_in", &s.Score.FitIn, "memory", fitIns); err != nil {
		return err
	}
	m := &s.Matching
	if err := enum("matching.algorithm", &m.Algorithm, "greedy", algorithms); err != nil {
		return err
	}
	if !present(doc, "matching.controls") {
		m.Controls = 1
	}
	if m.Controls < 1 {
		return bad("matching.controls", "%d is not allowed; give at least 1 control per treated unit", m.Controls)
	}
	if math.IsNaN(m.Caliper) {
		m.Caliper = DefaultCaliper
	}
	if m.Caliper < 0 || math.IsInf(m.Caliper, 0) {
		return bad("matching.caliper", "%v is negative; give a width in SDs of logit(ps) (0.2 is usual) or 0 for none", m.Caliper)
	}
	for _, col := range m.ExactOn {
		if used[col] != "cohort.covariates" {
			return bad("matching.exact_on", "%q is not listed in cohort.covariates", col)
		}
	}
	if err := enum("matching.order", &m.Order, "high-score-first", orders); err != nil {
		return err
	}
	if m.Reuse && m.Algorithm != "greedy" {
		return bad("matching.reuse", "only greedy matching reuses comparison units; set reuse: false for %s", m.Algorithm)
	}
	if m.KeepPrior && m.Algorithm != "greedy" && m.Algorithm != "optimal" {
		return bad("matching.keep_prior", "keeps greedy or optimal sets only; %s rebuilds every set", m.Algorithm)
	}
	if m.MaxControls < 0 || m.MaxTreated < 0 {
		return bad("matching.max_controls", "bounds must be >= 0 (0: no bound)")
	}
	if m.Subclasses < 0 || m.Subclasses == 1 {
		return bad("matching.subclasses", "%d subclasses is not allowed; give at least 2 (0 picks 5)", m.Subclasses)
	}
	if err := m.validateDistance(c, used, bad); err != nil {
		return err
	}
	if !present(doc, "matching.seed") {
		m.Seed = DefaultSeed
	}
	if !present(doc, "weighting") {
		s.Weighting = []string{"att", "ate", "overlap"}
	}
	seenScheme := map[string]bool{}
	for _, w := range s.Weighting {
		if !oneOf(w, schemes) {
			return bad("weighting", "%q is not one of %s", w, strings.Join(schemes, " | "))
		}
		if seenScheme[w] {
			return bad("weighting", "%q is listed twice", w)
		}
		seenScheme[w] = true
	}
	b := &s.Balance
	def := balance.DefaultLimits()
	if !present(doc, "balance.smd_limit") {
		b.SMDLimit = def.SMD
	}
	if !present(doc, "balance.variance_ratio_limit") {
		b.VarianceRatioLimit = def.VarRatio
	}
	if !(b.SMDLimit > 0) {
		return bad("balance.smd_limit", "must be > 0 (0.1 is usual)")
	}
	if !(b.VarianceRatioLimit > 1) {
		return bad("balance.variance_ratio_limit", "must be > 1 (2 is usual: ratios between 1/2 and 2 pass)")
	}
	if err := enum("balance.on_fail", &b.OnFail, "reject", onFails); err != nil {
		return err
	}
	if err := enum("estimate.estimand", &s.Estimate.Estimand, "att", estimands); err != nil {
		return err
	}
	if s.Estimate.Bootstrap < 0 || s.Estimate.Bootstrap == 1 {
		return bad("estimate.bootstrap", "%d replicates is not allowed; give 0 (none) or at least 2 (200 or more is usual)", s.Estimate.Bootstrap)
	}
	if !present(doc, "estimate.seed") {
		s.Estimate.Seed = DefaultSeed
	}
	r := &s.Rules
	if n := len(r.Percentiles); n != 0 && (n != 2 || !(0 <= r.Percentiles[0] && r.Percentiles[0] <= r.Percentiles[1] && r.Percentiles[1] <= 100)) {
		return bad("weight_rules.percentiles", "give two percentiles [low, high] with 0 <= low <= high <= 100, e.g. [1, 99]")
	}
	if n := len(r.Bounds); n != 0 && (n != 2 || !(0 <= r.Bounds[0] && r.Bounds[0] <= r.Bounds[1]) || math.IsInf(r.Bounds[1], 0)) {
		return bad("weight_rules.bounds", "give two bounds [low, high] with 0 <= low <= high, e.g. [0.05, 20]")
	}
	if scheme := s.PrimaryScheme(); scheme != "" && !seenScheme[scheme] {
		s.Weighting = append(s.Weighting, scheme)
	}
	if err := s.validateFitIn(doc); err != nil {
		return err
	}
	o := &s.Output
	if e, ok := warehouse.Lookup(s.Warehouse.Engine); ok && o.Schema == "" {
		o.Schema = e.DefaultSchema
	}
	if err := warehouse.ValidIdent(o.Schema); err != nil {
		return bad("output.schema", "%v", err)
	}
	if o.Prefix == "" {
		o.Prefix = s.Study + "_"
	}
	if err := warehouse.ValidIdent(o.Prefix + "balance_history"); err != nil {
		return bad("output.prefix", "%q cannot start table names: %v", o.Prefix, err)
	}
	if o.KeepRuns == -1 {
		o.KeepRuns = DefaultKeepRuns
	}
	if o.KeepRuns < 0 {
		return bad("output.keep_runs", "must be >= 0 (0 keeps every run)")
	}
	if o.KeepFailedDays == -1 {
		o.KeepFailedDays = DefaultKeepFailedDays
	}
	if o.KeepFailedDays < 0 {
		return bad("output.keep_failed_days", "must be >= 0 (0 keeps every run that did not succeed)")
	}
	return nil
}

// schemeFor maps an estimand to the weighting scheme that targets it.
// validateDistance checks matching.distance and matching.distance_on:
// a Mahalanobis distance needs greedy or optimal matching (the ones that
// take assign.Metric) and a caliper > 0 (which bounds the candidates each
// treated unit compares), and its covariates must be cohort covariates.
func (m *MatchingSpec) validateDistance(c *CohortSpec, used map[string]string, bad func(key, format string, args ...any) error) error {
	if m.Distance == "" {
		m.Distance = "logit"
	}
	if !oneOf(m.Distance, distances) {
		return bad("matching.distance", "%q is not one of %s", m.Distance, strings.Join(distances, " | "))
	}
	if m.Distance == "logit" {
		if len(m.DistanceOn) > 0 {
			return bad("matching.distance_on", "only applies with distance: mahalanobis or rank_mahalanobis (distance is logit)")
		}
		return nil
	}
	if m.Algorithm != "greedy" && m.Algorithm != "optimal" {
		return bad("matching.distance", "%s distance works with algorithm greedy or optimal only, not %s; use distance: logit", m.Distance, m.Algorithm)
	}
	if m.Caliper == 0 {
		return bad("matching.caliper", "%s distance needs a propensity caliper > 0 (it bounds which pairs may match); 0.2 is usual", m.Distance)
	}
	seen := map[string]bool{}
	for _, col := range m.DistanceOn {
		if used[col] != "cohort.covariates" {
			return bad("matching.distance_on", "%q is not listed in cohort.covariates", col)
		}
		if seen[col] {
			return bad("matching.distance_on", "%q is listed twice", col)
		}
		seen[col] = true
	}
	if len(m.DistanceOn) == 0 && len(c.Categorical) >= len(c.Covariates) {
		return bad("matching.distance_on", "missing; every covariate is categorical, so name the covariates of the %s distance", m.Distance)
	}
	return nil
}

// schemeFor maps an estimand to the weighting scheme that targets it.
var schemeFor = func() map[string]string {
	m := map[string]string{}
	for _, d := range weights.Schemes {
		m[d.Estimand] = d.Name
	}
	return m
}()

// PrimaryScheme is the weighting scheme behind the headline estimate, or
// "" when the headline comes from matching. Greedy matching of controls to
// treated units targets the ATT, so matching is the headline only when the
// estimand is att; any other estimand is served by its weighting scheme.
func (s *Spec) PrimaryScheme() string {
	if s.Matching.Algorithm != "off" && s.Estimate.Estimand == "att" {
		return ""
	}
	return schemeFor[s.Estimate.Estimand]
}

// Primary names the adjustment behind the headline: "matched" or a scheme.
func (s *Spec) Primary() string {
	if p := s.PrimaryScheme(); p != "" {
		return p
	}
	return "matched"
}

// Redacted returns the spec as JSON for the runs table with any password
// removed from the DSN.
func (s *Spec) Redacted() string {
	c := *s
	c.Warehouse.DSN = RedactDSN(s.Warehouse.DSN)
	b, _ := json.Marshal(c)
	return string(b)
}

var kvPassword = regexp.MustCompile(`(?i)(password\s*=\s*)('[^']*'|\S+)`)

// RedactDSN removes a password from a URL or key=value DSN. A file path
// comes back unchanged.
func RedactDSN(dsn string) string {
	if u, err := url.Parse(dsn); err == nil && u.Scheme != "" && u.Host != "" {
		if _, has := u.User.Password(); has {
			u.User = url.UserPassword(u.User.Username(), "redacted")
		}
		q := u.Query()
		for k := range q {
			if strings.EqualFold(k, "password") {
				q.Set(k, "redacted")
			}
		}
		u.RawQuery = q.Encode()
		return u.String()
	}
	return kvPassword.ReplaceAllString(dsn, "${1}redacted")
}

// Schemes lists the weighting schemes in a stable order for the weights
// table: the study's order.
func (s *Spec) Schemes() []string { return append([]string(nil), s.Weighting...) }

// OutputTarget is where the study's tables live, for commands that read
// them without running (unit and covariate details come from the run).
func (s *Spec) OutputTarget() warehouse.Output {
	out := warehouse.Output{Schema: s.Output.Schema, Prefix: s.Output.Prefix, Study: s.Study, KeepRuns: s.Output.KeepRuns, KeepFailedDays: s.Output.KeepFailedDays,
		Unit: s.Cohort.Unit, Treatment: s.Cohort.Treatment, Outcomes: s.Cohort.Outcomes, Schemes: s.Schemes()}
	declared := map[string]bool{}
	for _, c := range s.Cohort.Categorical {
		declared[c] = true
	}
	for _, c := range s.Cohort.Covariates {
		kind := warehouse.Numeric
		if declared[c] {
			kind = warehouse.Categorical
		}
		out.Covariates = append(out.Covariates, warehouse.CovariateMeta{Name: c, Kind: kind})
	}
	return out
}

// validateKinds checks the time-to-event and rate outcomes: names unique
// among all outcomes (they name effects rows), columns valid and not used
// in another role, horizons positive and increasing.
func (c *CohortSpec) validateKinds(used map[string]string, bad func(key, format string, args ...any) error) error {
	names := map[string]string{}
	for _, o := range c.Outcomes {
		names[o] = "cohort.outcomes"
	}
	name := func(key, n string) error {
		if n == "" {
			return bad(key, "missing; give the outcome a name like readmission")
		}
		if err := warehouse.ValidIdent(n); err != nil {
			return bad(key, "%v", err)
		}
		if prev, ok := names[n]; ok {
			return bad(key, "outcome name %q is already used in %s", n, prev)
		}
		names[n] = key
		return nil
	}
	column := func(key, col, what string) error {
		if col == "" {
			return bad(key, "missing; name the column that holds the %s", what)
		}
		if err := warehouse.ValidIdent(col); err != nil {
			return bad(key, "%v", err)
		}
		if prev, ok := used[col]; ok {
			return bad(key, "column %q is already used as %s", col, prev)
		}
		used[col] = key
		return nil
	}
	for _, t := range c.TimeToEvent {
		if err := name("cohort.time_to_event.name", t.Name); err != nil {
			return err
		}
		if err := column("cohort.time_to_event.time", t.Time, "follow-up time (> 0)"); err != nil {
			return err
		}
		if err := column("cohort.time_to_event.event", t.Event, "event flag (1 = event, 0 = censored)"); err != nil {
			return err
		}
		if len(t.Horizons) == 0 {
			return bad("cohort.time_to_event.horizons", "missing for %s; list the times (in %s's unit) at which to report risks, e.g. [365]", t.Name, t.Time)
		}
		for i, h := range t.Horizons {
			if !(h > 0) || math.IsInf(h, 0) {
				return bad("cohort.time_to_event.horizons", "%v is not a positive time (outcome %s)", h, t.Name)
			}
			if i > 0 && !(h > t.Horizons[i-1]) {
				return bad("cohort.time_to_event.horizons", "must increase (outcome %s: %v after %v)", t.Name, h, t.Horizons[i-1])
			}
		}
	}
	for _, r := range c.Rates {
		if err := name("cohort.rates.name", r.Name); err != nil {
			return err
		}
		if err := column("cohort.rates.count", r.Count, "event count (>= 0, whole numbers)"); err != nil {
			return err
		}
		if err := column("cohort.rates.exposure", r.Exposure, "exposure (> 0, e.g. member-months)"); err != nil {
			return err
		}
	}
	return nil
}

// validateFitIn rejects the options warehouse-scale mode does not carry
// out: everything that needs the covariate matrix or per-unit outcomes in
// the process (augmented estimates, the bootstrap's refits, weight rules
// computed over the weight distribution), matching that is not a 1:k
// greedy or optimal match, and reuse (whose Abadie–Imbens variance needs
// per-unit outcomes). The engine's support for InWarehouse is checked
// when the run opens it.
func (s *Spec) validateFitIn(doc *yaml.Node) error {
	if s.Score.FitIn != "warehouse" {
		return nil
	}
	bad := func(key, what string) error {
		return &SpecError{Path: s.Path, Line: lineOf(doc, key), Msg: key + ": " + what + " is not available with score.fit_in: warehouse; remove it or use fit_in: memory"}
	}
	m := s.Matching
	switch {
	case m.Algorithm == "full" || m.Algorithm == "strata":
		return bad("matching.algorithm", m.Algorithm+" matching")
	case m.KeepPrior:
		return bad("matching.keep_prior", "keeping prior sets")
	case m.Reuse:
		return bad("matching.reuse", "matching with reuse")
	case s.Estimate.Augment:
		return bad("estimate.augment", "the augmented estimator")
	case s.Estimate.Bootstrap > 0:
		return bad("estimate.bootstrap", "the bootstrap")
	case s.Rules.Stabilize || len(s.Rules.Percentiles) > 0 || len(s.Rules.Bounds) > 0:
		return bad("weight_rules", "a weight rule")
	case s.Cohort.RareLevels > 0:
		// The engine writes the snapshot and the sums from the cohort
		// query itself; pooling would have to be SQL, which the analyst
		// can write (CASE WHEN … THEN '(rare)').
		return bad("cohort.rare_levels", "pooling rare levels")
	}
	return nil
}
