package warehouse

import (
	"fmt"
	"strings"
)

// Balance and effect sums of one run in warehouse-scale mode, by plain
// aggregates over the run's own snapshot rows. The balance_history view
// computes the balance for every kept run through a chain of joins and
// unions; read for one run inside the publish transaction it cost most of
// the publish stage (about 30 s at 2 million units on DuckDB) and more
// memory than the rest of the run. Then one query per outcome and
// adjustment for the effects, each joining the snapshot to the weights
// table, cost as much again. RunSumsSQL makes one pass for all of it.

// RunSums describes RunSumsSQL's pass.
type RunSums struct {
	// Covariates of the snapshot, with each categorical one's levels
	// (Levels[i] for covariate i, from BalanceLevelsSQL) and each numeric
	// one's shift (Shifts, numeric covariates in order; the cohort mean).
	Covariates []CovariateMeta
	Levels     [][]string
	Shifts     []float64
	// Matched adds the matched adjustment: the unit's set_weight in the
	// matches table, 0 for an unmatched unit. Each unit must be in at
	// most one set (warehouse-scale mode matches without reuse).
	Matched bool
	// Schemes are the weighting schemes, computed from the snapshot's
	// row with Design, Coef and Support exactly as ScoreInto computed the
	// weights table from the cohort query: the snapshot holds the same
	// values (numeric covariates as the same doubles, categorical ones as
	// the level text the design compares), so the weights are the same
	// numbers, without a join of the snapshot to the weights table.
	Schemes []string
	Design  *DesignSQL
	Coef    []float64
	Support Support
	// Outcomes get effect sums under every adjustment but matched (whose
	// SE needs per-set sums: MatchedSumsSQL).
	Outcomes []string
	// Cohort, when set, makes the pass read the cohort query itself
	// rather than the run's snapshot (no matched adjustment then), with
	// OutcomeBool flagging its boolean outcomes. With a partition column
	// this is the pass a distributed engine runs on its nodes; the
	// snapshot lives on the coordinator.
	Cohort      *CohortQuery
	OutcomeBool []bool
	// Decimal sums NUMERICs, one aggregate per value: on Postgres, when
	// the integer parts would pass its 1,664 result columns
	// (RunSumsAggregates > MaxAggregates).
	Decimal bool
}

// Adjustments is the number of adjustments: unadjusted, matched when
// set, then each scheme.
func (r RunSums) Adjustments() int {
	n := 1 + len(r.Schemes)
	if r.Matched {
		n++
	}
	return n
}

// EffectAdjustments is the number of adjustments with effect sums: all
// but matched.
func (r RunSums) EffectAdjustments() int {
	return 1 + len(r.Schemes)
}

// BalanceWidth is the number of balance columns per adjustment: Σw, Σw²,
// then 2 per numeric covariate and 1 per level.
func (r RunSums) BalanceWidth() int {
	n := 2
	for i, cv := range r.Covariates {
		if cv.Kind == Categorical {
			n += len(r.Levels[i])
		} else {
			n += 2
		}
	}
	return n
}

// EffectWidth is the number of effect columns per outcome and
// adjustment.
const EffectWidth = 8

// RunSumsSQL returns the one aggregate pass of a run's balance and effect
// sums ($1 the run id), one row per arm:
//
//   - t, the treatment;
//   - per adjustment a (unadjusted w = 1, matched when set, each scheme;
//     BalanceWidth columns): Σw_a, Σw_a², then per covariate in order,
//     numeric: Σw_a·δ and Σw_a·δ² with δ = x − K (K its shift),
//     categorical: Σw_a·[x = l] for each of its levels;
//   - per outcome, per adjustment but matched (EffectWidth columns each):
//     over rows with w > 0, the rows with the outcome present, the rows
//     with it missing, Σw, Σw·y, Σw²·y², Σw²·y, Σw² (outcome present), and
//     the count of outcomes other than 0 and 1.
//
// With K near the arm means, Σw·(x − m)² = Σw·δ² − (Σw·δ)²/Σw loses no
// digits worth counting (the shifted one-pass algorithm; Chan, Golub &
// LeVeque 1983), so one pass gives what the view's two passes give. A
// weight of 0 adds nothing to any sum, which is the view's exclusion of
// unmatched and zero-weight units. Every aggregate is a plain sum, so a
// distributed engine computes it as partial sums per node. lateral
// chooses how each per-row value is computed once (chainLevels): true
// for Postgres.
func RunSumsSQL(c *Contract, r RunSums, lateral bool) (string, []any, error) {
	if len(r.Levels) != len(r.Covariates) {
		panic(fmt.Sprintf("warehouse: %d level lists for %d covariates", len(r.Levels), len(r.Covariates)))
	}
	b := &ScaleSQL{args: []any{nil}}
	if r.Cohort != nil {
		if r.Matched {
			panic("warehouse: matched sums read the snapshot, not the cohort query")
		}
		b.args = nil // no run id: the rows are the cohort query's
	}
	// Level 0: per snapshot row, the treatment, covariate deltas and level
	// indicators, outcomes, the weights of unadjusted and matched, and
	// (for the schemes) the linear predictor.
	l0 := []col{{"t", "c." + Quote(c.Treatment)}}
	if r.Cohort != nil {
		l0[0].expr = "(" + r.Design.TreatmentExpr() + ") = 1"
	}
	// The columns are named as balanceTerms names them for runSums.
	k := 0 // next numeric covariate's shift
	for i, cv := range r.Covariates {
		if err := ValidIdent(cv.Name); err != nil {
			return "", nil, fmt.Errorf("cohort.covariates: %w", err)
		}
		src := "c." + Quote(cv.Name)
		if cv.Kind == Categorical {
			for j, l := range r.Levels[i] {
				name := fmt.Sprintf("i%d_%d", i+1, j)
				if r.Cohort != nil && r.Design.isBool(cv.Name) && (l == "true" || l == "false") {
					// As the design tests a boolean: shippable to a node.
					test := src
					if l == "false" {
						test = "NOT " + src
					}
					l0 = append(l0, col{name, "CAST(CASE WHEN " + test + " THEN 1 ELSE 0 END AS DOUBLE PRECISION)"})
					continue
				}
				l0 = append(l0, col{name, fmt.Sprintf("CAST(CASE WHEN CAST(%s AS VARCHAR) = %s THEN 1 ELSE 0 END AS DOUBLE PRECISION)", src, b.Str(l))})
			}
			continue
		}
		if k >= len(r.Shifts) {
			panic("warehouse: too few shifts")
		}
		name := fmt.Sprintf("d%d", i+1)
		l0 = append(l0, col{name, fmt.Sprintf("CAST(%s AS DOUBLE PRECISION) - %s", src, b.Num(r.Shifts[k]))})
		k++
	}
	for i, o := range r.Outcomes {
		if err := ValidIdent(o); err != nil {
			return "", nil, fmt.Errorf("cohort.outcomes: %w", err)
		}
		y := "CAST(c." + Quote(o) + " AS DOUBLE PRECISION)"
		if i < len(r.OutcomeBool) && r.OutcomeBool[i] {
			y = "CASE WHEN c." + Quote(o) + " THEN 1.0 WHEN NOT c." + Quote(o) + " THEN 0.0 END"
		}
		l0 = append(l0, col{fmt.Sprintf("y%d", i+1), y})
	}
	l0 = append(l0, col{"w0", "CAST(1 AS DOUBLE PRECISION)"})
	if r.Matched {
		l0 = append(l0, col{"wm", "CAST(coalesce(m.w, 0) AS DOUBLE PRECISION)"})
	}
	levels := [][]col{l0}
	if len(r.Schemes) > 0 {
		// The snapshot's columns under the design's reading: treatment
		// boolean, categorical levels as text.
		d := *r.Design
		if r.Cohort == nil {
			d.Treatment, d.TreatmentBool = c.Treatment, true
			d.Columns = append([]DesignColumn(nil), r.Design.Columns...)
			for j := range d.Columns {
				if d.Columns[j].Categorical {
					d.Columns[j].Text, d.Columns[j].Bool = true, false
				}
			}
		}
		// The design's columns on their original scale in level 0 and η
		// from them in its own level: the same operations in the same
		// order as RawEta, so the same numbers as the weights table's.
		if len(r.Coef) != len(d.Columns)+1 {
			panic(fmt.Sprintf("warehouse: %d coefficients for %d design columns", len(r.Coef), len(d.Columns)))
		}
		levels[0] = append(levels[0], col{"z", d.TreatmentExpr()})
		eta := []string{b.Num(r.Coef[0])}
		for j, dc := range d.Columns {
			levels[0] = append(levels[0], col{fmt.Sprintf("r%d", j+1), b.rawExpr(dc)})
			eta = append(eta, fmt.Sprintf("%s * r%d", b.Num(r.Coef[j+1]), j+1))
		}
		levels = append(levels, []col{{"eta", strings.Join(eta, " + ")}})
		e := Logistic("eta")
		if r.Cohort != nil && r.Cohort.Partition != "" {
			e = "0.5 + 0.5 * tanh(eta / 2)" // one reference to η (compactLevels)
		}
		levels = append(levels, []col{{"e", e}, {"ins", b.InSupport("eta", r.Support)}})
		var ws []col
		for i, s := range r.Schemes {
			if err := ValidIdent(s); err != nil {
				return "", nil, fmt.Errorf("weighting scheme: %w", err)
			}
			w, err := WeightSQL(s)
			if err != nil {
				return "", nil, err
			}
			ws = append(ws, col{fmt.Sprintf("ws%d", i+1), w})
		}
		levels = append(levels, ws)
	}
	base := QuoteQualified(c.Schema, c.Cohort.Name) + " AS c"
	if r.Cohort != nil {
		base = From(r.Cohort.SQL)
		if r.Cohort.Partition != "" {
			lateral = false // as in MomentsSQL: nothing a node cannot run
		}
	}
	if r.Matched {
		unit := Quote(c.Unit)
		if lateral {
			// Each unit is in at most one of the run's sets (RunSums.Matched),
			// so a plain join gives its weight; Postgres cannot put an
			// aggregated subquery, which has a parallel plan of its own,
			// under the parallel aggregate.
			base += "\nLEFT JOIN (SELECT " + unit + " AS k, set_weight AS w FROM " + QuoteQualified(c.Schema, c.Matches.Name) +
				" WHERE run_id = CAST($1 AS VARCHAR)) AS m ON m.k = c." + unit
		} else {
			// DuckDB does not count the transaction's own new rows in its
			// estimates; the aggregate makes the matches side the small,
			// built side of the join.
			base += "\nLEFT JOIN (SELECT " + unit + " AS k, sum(set_weight) AS w FROM " + QuoteQualified(c.Schema, c.Matches.Name) +
				" WHERE run_id = CAST($1 AS VARCHAR) GROUP BY " + unit + ") AS m ON m.k = c." + unit
		}
	}
	where, partition := "c.run_id = CAST($1 AS VARCHAR)", ""
	if r.Cohort != nil {
		where, partition = "", r.Cohort.Partition
	}
	from := chainLevels(base, where, levels, lateral, partition)
	return runSums(r).arraySQL(from, partitionRef(partition), "t"), b.args, nil
}

// runSums lists RunSumsSQL's sums in NewSums's order over the level
// columns it names: w0, wm, ws1… for the adjustments' weights, the
// balance terms of balanceTerms, outcomes y1….
func runSums(r RunSums) *sumSet {
	weights := []string{"w0"}
	if r.Matched {
		weights = append(weights, "wm")
	}
	for i := range r.Schemes {
		weights = append(weights, fmt.Sprintf("ws%d", i+1))
	}
	bal := balanceTerms(r)
	ss := &sumSet{decimal: r.Decimal || r.Cohort != nil && r.Cohort.Partition != ""}
	for _, w := range weights {
		ss.sum(w, rawScale)
		ss.sum(w+" * "+w, rawScale)
		for _, term := range bal {
			ss.sum(w+" * "+term, rawScale)
		}
	}
	for i := range r.Outcomes {
		y := fmt.Sprintf("y%d", i+1)
		for a, w := range weights {
			if r.Matched && a == 1 {
				continue
			}
			pos := w + " > 0"
			ss.count(pos + " AND " + y + " IS NOT NULL")
			ss.count(pos + " AND " + y + " IS NULL")
			ss.sum("CASE WHEN "+y+" IS NOT NULL THEN "+w+" END", rawScale)
			ss.sum(w+" * "+y, rawScale)
			ss.sum(w+" * "+w+" * "+y+" * "+y, rawScale)
			ss.sum(w+" * "+w+" * "+y, rawScale)
			ss.sum("CASE WHEN "+y+" IS NOT NULL THEN "+w+" * "+w+" END", rawScale)
			ss.count(pos + " AND " + y + " <> 0 AND " + y + " <> 1")
		}
	}
	return ss
}

// balanceTerms names RunSumsSQL's per-row balance terms: per numeric
// covariate d and d·d, per categorical level its indicator.
func balanceTerms(r RunSums) []string {
	var bal []string
	for i, cv := range r.Covariates {
		if cv.Kind == Categorical {
			for j := range r.Levels[i] {
				bal = append(bal, fmt.Sprintf("i%d_%d", i+1, j))
			}
			continue
		}
		name := fmt.Sprintf("d%d", i+1)
		bal = append(bal, name, name+" * "+name)
	}
	return bal
}

// RunSumsAggregates is the number of aggregates of r's pass.
func RunSumsAggregates(r RunSums) int {
	return len(runSums(r).aggs())
}

// DecodeRunSums decodes the sums column of one RunSumsSQL row.
func DecodeRunSums(r RunSums, text string) ([]float64, error) {
	return runSums(r).decode(text)
}

// col is one per-row value of a query level: its name and defining
// expression.
type col struct{ name, expr string }

// chainLevels returns a FROM clause over base (filtered by where, when
// not empty) in which each level's columns are computed once per row and
// visible to the later levels and the outer select. Level 0 is a derived
// table over base, so that only its columns are visible above it, never
// base's own (whose names are the user's and could be any of ours); its
// expressions should be cheap, since Postgres pulls it up and copies them
// into every reference. The later levels are nested derived tables
// without lateral (DuckDB computes each projection once), and with
// lateral a chain of CROSS JOIN LATERAL unnest(ARRAY[…]) function scans:
// Postgres would pull plain derived tables up and copy each column's
// defining expression into every reference (η into each of k(k+1)/2
// sums, compounding per level), while an OFFSET 0 fence, which stops
// that, also stops the aggregate above from running as partial
// aggregates in parallel workers; a function scan's outputs stay plain
// columns and keep the parallel plan.
//
// partition, when set, is a column of base carried into level 0 as
// partitionKey, for arraySQL's per-partition grouping.
func chainLevels(base, where string, levels [][]col, lateral bool, partition string) string {
	if partition != "" {
		levels = append([][]col{append([]col{{partitionKey, "c." + Quote(partition)}}, levels[0]...)}, levels[1:]...)
	}
	if where != "" {
		where = "\nWHERE " + where
	}
	var sb strings.Builder
	for i, lv := range levels {
		parts := make([]string, len(lv))
		names := make([]string, len(lv))
		arrs := make([]string, len(lv))
		for j, c := range lv {
			parts[j] = c.expr + " AS " + c.name
			names[j] = c.name
			arrs[j] = "ARRAY[" + c.expr + "]"
		}
		switch {
		case i == 0:
			fmt.Fprintf(&sb, "(\nSELECT %s\nFROM %s%s\n) AS l0", strings.Join(parts, ",\n  "), base, where)
		case lateral:
			fmt.Fprintf(&sb, "\nCROSS JOIN LATERAL unnest(%s) AS l%d(%s)", strings.Join(arrs, ", "), i, strings.Join(names, ", "))
		default:
			inner := sb.String()
			sb.Reset()
			fmt.Fprintf(&sb, "(\nSELECT l%d.*, %s\nFROM %s\n) AS l%d", i-1, strings.Join(parts, ",\n  "), inner, i)
		}
	}
	return sb.String()
}

// BalanceLevelsSQL returns the distinct levels of the run's categorical
// covariates in its snapshot ($1 the run id), the view's level set: rows
// of (covariate index in covs, level text). Each branch reads one column
// of the snapshot, no join.
func BalanceLevelsSQL(c *Contract, covs []CovariateMeta) (string, error) {
	var parts []string
	for i, cv := range covs {
		if cv.Kind != Categorical {
			continue
		}
		if err := ValidIdent(cv.Name); err != nil {
			return "", fmt.Errorf("cohort.covariates: %w", err)
		}
		col := "CAST(" + Quote(cv.Name) + " AS VARCHAR)"
		parts = append(parts, fmt.Sprintf("SELECT DISTINCT %d AS i, %s AS level FROM %s WHERE run_id = CAST($1 AS VARCHAR) AND %s IS NOT NULL",
			i, col, QuoteQualified(c.Schema, c.Cohort.Name), Quote(cv.Name)))
	}
	if len(parts) == 0 {
		return "", nil
	}
	return strings.Join(parts, "\nUNION ALL\n"), nil
}

// ArmSums are one arm's effect sums over its usable rows (w > 0, outcome
// present): rows used and missing, Σw, Σw·y, Σw²·y², Σw²·y, Σw², and the
// count of outcomes other than 0 and 1.
type ArmSums struct {
	N, Missing, W, WY, W2Y2, W2Y, W2, NonBinary float64
}

// SetSums are one outcome's sums over matched sets g, with A_g = Σ_g w·y
// and B_g = Σ_g w per arm over the set's usable rows: G sets with a
// usable row, each arm's N, Missing, W = ΣB and WY = ΣA, and M the
// symmetric 4×4 matrix of Σ_g products of (A_T, B_T, A_C, B_C).
type SetSums struct {
	G    float64
	T, C ArmSums
	M    [4][4]float64
}

// BalanceSums are one adjustment's balance sums in one arm: Σw, Σw², then
// per covariate (RunSums order) Σw·δ and Σw·δ² when numeric, Σw·[x = l]
// per level when categorical.
type BalanceSums struct {
	W, W2 float64
	Terms []float64
}

// Sums are a run's sums from RunSumsSQL and MatchedSumsSQL, typed. Arm 0
// is the comparison arm, 1 the treated arm.
type Sums struct {
	// Spec is the pass's description with its categorical levels.
	Spec RunSums
	// Balance[a][g]: adjustment a (unadjusted, matched when set, each
	// scheme).
	Balance [][2]BalanceSums
	// Effects[o][a][g]: outcome o under adjustment a of all but matched.
	Effects [][][2]ArmSums
	// Matched[o]: the matched sets' sums of outcome o, when matched.
	Matched []SetSums
}

// NewSums unpacks RunSumsSQL's row per arm (the columns after t; zeros
// where an arm had no row) and MatchedSumsSQL's one row (nil without
// matching).
func NewSums(spec RunSums, arms [2][]float64, matched []float64) *Sums {
	s := &Sums{Spec: spec}
	bw, width := spec.BalanceWidth(), spec.Adjustments()*spec.BalanceWidth()+len(spec.Outcomes)*spec.EffectAdjustments()*EffectWidth
	for g := range arms {
		if arms[g] == nil {
			arms[g] = make([]float64, width)
		}
	}
	for a := range spec.Adjustments() {
		var b [2]BalanceSums
		for g := range 2 {
			v := arms[g][a*bw : (a+1)*bw]
			b[g] = BalanceSums{W: v[0], W2: v[1], Terms: v[2:]}
		}
		s.Balance = append(s.Balance, b)
	}
	for o := range spec.Outcomes {
		var per [][2]ArmSums
		for a := range spec.EffectAdjustments() {
			var e [2]ArmSums
			for g := range 2 {
				v := arms[g][spec.Adjustments()*bw+(o*spec.EffectAdjustments()+a)*EffectWidth:]
				e[g] = ArmSums{N: v[0], Missing: v[1], W: v[2], WY: v[3], W2Y2: v[4], W2Y: v[5], W2: v[6], NonBinary: v[7]}
			}
			per = append(per, e)
		}
		s.Effects = append(s.Effects, per)
	}
	for o := 0; o+MatchedWidth <= len(matched); o += MatchedWidth {
		v := matched[o : o+MatchedWidth]
		set := SetSums{G: v[0], T: ArmSums{N: v[1], Missing: v[3], W: v[5], WY: v[6]}, C: ArmSums{N: v[2], Missing: v[4], W: v[7], WY: v[8]}}
		// v[9..18]: AtAt AtBt BtBt AcAc AcBc BcBc AtAc AtBc BtAc BtBc
		m := &set.M
		m[0][0], m[0][1], m[1][1] = v[9], v[10], v[11]
		m[2][2], m[2][3], m[3][3] = v[12], v[13], v[14]
		m[0][2], m[0][3], m[1][2], m[1][3] = v[15], v[16], v[17], v[18]
		for i := range 4 {
			for j := range i {
				m[i][j] = m[j][i]
			}
		}
		s.Matched = append(s.Matched, set)
	}
	return s
}

// isBool reports whether the design reads covariate name as a boolean.
func (d *DesignSQL) isBool(name string) bool {
	for _, c := range d.Columns {
		if c.Source == name && c.Bool {
			return true
		}
	}
	return false
}
