package warehouse

import (
	"errors"
	"strings"
	"testing"
)

func contractOutput() Output {
	return Output{Schema: "main", Prefix: "hf_", Study: "hf", Unit: "member_id", IDKind: IDInt, Treatment: "coached",
		Covariates: []CovariateMeta{{"age", Numeric}, {"sex", Categorical}},
		Outcomes:   []string{"readmit_30d"}, Schemes: []string{"att", "overlap"}}
}

func names(cols []Column) string {
	var s []string
	for _, c := range cols {
		s = append(s, c.Name)
	}
	return strings.Join(s, ",")
}

// TestSurvivalTableOnlyWithTimeToEvent: the survival table and its view
// exist exactly when the study has time-to-event outcomes, and retention
// deletes from it before the runs table.
func TestSurvivalTableOnlyWithTimeToEvent(t *testing.T) {
	out := contractOutput()
	c, err := NewContract(out)
	if err != nil {
		t.Fatal(err)
	}
	if c.Survival.Name != "" || len(c.Tables()) != 6 {
		t.Errorf("without time-to-event outcomes: survival table %q, %d tables", c.Survival.Name, len(c.Tables()))
	}
	out.TimeToEvent = true
	o, err := NewObjects(out)
	if err != nil {
		t.Fatal(err)
	}
	c = o.C
	if c.Survival.Name != "hf_survival" || c.CurrentSurvival != "hf_current_survival" ||
		names(c.Survival.Columns) != "run_id,outcome,adjustment,treated,time,at_risk,events,censored,survival,std_error" {
		t.Errorf("survival table %s(%s), view %s", c.Survival.Name, names(c.Survival.Columns), c.CurrentSurvival)
	}
	rt := o.RetentionTables()
	if rt[len(rt)-2] != o.Survival || rt[len(rt)-1] != o.Runs {
		t.Errorf("retention order %v", rt)
	}
}

func TestNewContract(t *testing.T) {
	c, err := NewContract(contractOutput())
	if err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		table *Table
		name  string
		cols  string
	}{
		{&c.Runs, "hf_runs", "run_id,study,status,started_at,finished_at,tool_version,spec_sha256,spec,cohort_sql,cohort_fingerprint,counts,model,balance,effects,engine,db_user,message,summary"},
		{&c.Cohort, "hf_cohort", "run_id,member_id,coached,age,sex,readmit_30d"},
		{&c.Scores, "hf_scores", "run_id,member_id,treated,ps,logit_ps,in_support"},
		{&c.Matches, "hf_matches", "run_id,set_id,member_id,treated,set_weight,match_distance"},
		{&c.Weights, "hf_weights", "run_id,member_id,treated,att,overlap"},
		{&c.Effects, "hf_effects", "run_id,outcome,adjustment,estimand,contrast,method,estimate,std_error,ci_low,ci_high,p_value,n_treated,n_control,n_missing,e_value,e_value_ci,rosenbaum_gamma,horizon"},
		{&Table{Name: c.Analysis, Comment: "view", Columns: c.AnalysisColumns}, "hf_analysis",
			"run_id,member_id,coached,age,sex,readmit_30d,ps,logit_ps,in_support,set_id,set_count,matched_weight,att,overlap"},
	}
	for _, tt := range tests {
		if tt.table.Name != tt.name || names(tt.table.Columns) != tt.cols {
			t.Errorf("table %s(%s), want %s(%s)", tt.table.Name, names(tt.table.Columns), tt.name, tt.cols)
		}
		if tt.table.Comment == "" {
			t.Errorf("table %s has no comment", tt.name)
		}
		for _, col := range tt.table.Columns {
			if col.Comment == "" {
				t.Errorf("column %s.%s has no comment", tt.name, col.Name)
			}
		}
	}
	if c.Cohort.Columns[1].Type != TypeBigInt || c.Cohort.Columns[3].Type != TypeDouble || c.Cohort.Columns[4].Type != TypeText {
		t.Errorf("cohort column types %+v", c.Cohort.Columns)
	}
	if c.CurrentCohort != "hf_current_cohort" || c.Balance != "hf_balance" || c.BalanceHistory != "hf_balance_history" ||
		c.CurrentEffects != "hf_current_effects" || c.Analysis != "hf_analysis" {
		t.Errorf("views %s %s %s", c.CurrentCohort, c.Balance, c.BalanceHistory)
	}
	out := contractOutput()
	out.IDKind = IDText
	if c, _ := NewContract(out); c.Scores.Columns[1].Type != TypeText {
		t.Errorf("text unit column type %v", c.Scores.Columns[1].Type)
	}
}

func TestNewContractErrors(t *testing.T) {
	tests := []struct {
		name string
		edit func(*Output)
		want string
	}{
		{"schema", func(o *Output) { o.Schema = "Main" }, "output.schema"},
		{"prefix chars", func(o *Output) { o.Prefix = "hf-" }, `output.prefix "hf-"`},
		{"prefix too long", func(o *Output) { o.Prefix = strings.Repeat("p", 49) }, "gives the object name " + strings.Repeat("p", 49) + "current_matches"},
		{"prefix starts with digit", func(o *Output) { o.Prefix = "1_" }, "starts with a digit"},
		{"covariate name", func(o *Output) { o.Covariates[0].Name = "Age" }, "upper-case"},
		{"covariate is run_id", func(o *Output) { o.Covariates[0].Name = "run_id" }, "hf_cohort would have two columns named run_id"},
		{"outcome repeats covariate", func(o *Output) { o.Outcomes = []string{"age"} }, "two columns named age"},
		{"unit named treated", func(o *Output) { o.Unit = "treated" }, "hf_scores would have two columns named treated"},
		{"scheme named ps", func(o *Output) { o.Schemes = []string{"treated"} }, "hf_weights"},
		{"scheme repeated", func(o *Output) { o.Schemes = []string{"att", "att"} }, "two columns named att"},
		{"covariate named ps", func(o *Output) { o.Covariates[0].Name = "ps" }, "hf_analysis would have two columns named ps"},
		{"scheme named like a covariate", func(o *Output) { o.Schemes = []string{"age"} }, "hf_analysis would have two columns named age"},
		{"empty unit", func(o *Output) { o.Unit = "" }, "empty identifier"},
	}
	for _, tt := range tests {
		out := contractOutput()
		out.Covariates = append([]CovariateMeta(nil), out.Covariates...)
		tt.edit(&out)
		_, err := NewContract(out)
		if err == nil || !errors.Is(err, ErrBadInput) || !strings.Contains(err.Error(), tt.want) {
			t.Errorf("%s: error %v, want ErrBadInput mentioning %q", tt.name, err, tt.want)
		}
	}
}
