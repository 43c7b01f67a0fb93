{{/*
Balance of every covariate before and after each adjustment, one row per
run × covariate × level × adjustment.

Data: .View .Runs .Cohort .Matches .Weights (quoted, schema-qualified);
.Unit .Treatment (quoted column names); .Current (only the latest succeeded
run); .Vars: covariates in study order, each with .Name (raw), .Col (quoted),
.Alias (x1, x2, ...: internal names that cannot collide), .Categorical;
.Schemes: each with .Name (raw) and .Col (quoted weights column).

Definitions (Austin 2009, Stat Med 28:3083; Austin & Stuart 2015, Stat Med
34:3661):
  weights   unadjusted: every unit of the run's cohort snapshot, w = 1;
            matched: w = Σ set_weight over the unit's rows in matches
            (units without a row are excluded); scheme s: w = the weights
            column s, units with w = 0 excluded.
  variables a numeric covariate is one variable; a categorical covariate
            gives one 0/1 variable per level, the levels being the distinct
            values of that run's snapshot.
  mean      m = Σw·x / Σw
  variance  v = Σw·(x − m)² / (Σw − Σw²/Σw)   (reliability weights; the n−1
            sample variance when all w = 1). Σw·(x − m)² is computed in a
            second pass instead of Σw·x² − (Σw·x)²/Σw: the two are equal in
            exact arithmetic and the second pass does not cancel digits.
            For a 0/1 variable it equals Σw·x − (Σw·x)²/Σw exactly.
  smd       (m_T − m_C) / d, d from the run's UNADJUSTED arms whatever the
            adjustment, so that before and after are comparable:
            numeric d = √((v_T + v_C)/2), a level d = √((p_T(1−p_T) + p_C(1−p_C))/2);
            NULL when d = 0.
  ratio     variance_ratio = v_T / v_C, NULL when v_C = 0.
A covariate a run did not have (it holds NULL in the snapshot: the cohort
itself can hold no NULL covariate) gives no rows for that run.
*/ -}}
CREATE OR REPLACE VIEW {{.View}} AS
{{- if not .Vars}}
SELECT CAST(NULL AS TEXT) AS run_id, CAST(NULL AS TEXT) AS covariate,
       CAST(NULL AS TEXT) AS level, CAST(NULL AS TEXT) AS adjustment,
       CAST(NULL AS DOUBLE PRECISION) AS mean_treated, CAST(NULL AS DOUBLE PRECISION) AS mean_control,
       CAST(NULL AS DOUBLE PRECISION) AS sd_treated, CAST(NULL AS DOUBLE PRECISION) AS sd_control,
       CAST(NULL AS DOUBLE PRECISION) AS smd, CAST(NULL AS DOUBLE PRECISION) AS variance_ratio
WHERE FALSE;
{{- else}}
WITH
{{- if .Current}}
cur AS (
    SELECT run_id
    FROM {{.Runs}}
    WHERE status = 'succeeded'
    ORDER BY finished_at DESC, run_id DESC
    LIMIT 1
),
{{- end}}
wt AS (
    SELECT run_id, {{.Unit}} AS unit_key, 'unadjusted' AS adjustment, CAST(1 AS DOUBLE PRECISION) AS w
    FROM {{.Cohort}}
    WHERE {{template "runs" .}}
    UNION ALL
    SELECT run_id, {{.Unit}}, 'matched', SUM(set_weight)
    FROM {{.Matches}}
    WHERE {{template "runs" .}}
    GROUP BY run_id, {{.Unit}}
{{- range .Schemes}}
    UNION ALL
    SELECT run_id, {{$.Unit}}, {{lit .Name}}, {{.Col}}
    FROM {{$.Weights}}
    WHERE {{.Col}} <> 0 AND {{template "runs" $}}
{{- end}}
),
u AS (
    SELECT c.run_id, wt.adjustment, c.{{.Treatment}} AS treated, wt.w
{{- range .Vars}},
           c.{{.Col}} AS {{.Alias}}
{{- end}}
    FROM {{.Cohort}} c
    JOIN wt ON wt.run_id = c.run_id AND wt.unit_key = c.{{.Unit}}
),
s1 AS (
    SELECT run_id, adjustment, treated
{{- range .Vars}},
           SUM(CASE WHEN {{.Alias}} IS NOT NULL THEN w END) AS {{.Alias}}_sw,
           SUM(CASE WHEN {{.Alias}} IS NOT NULL THEN w * w END) AS {{.Alias}}_sww
{{- if not .Categorical}},
           SUM(w * {{.Alias}}) AS {{.Alias}}_swx
{{- end}}
{{- end}}
    FROM u
    GROUP BY run_id, adjustment, treated
),
{{- if .HasNumeric}}
m AS (
    SELECT run_id, adjustment, treated
{{- range .Vars}}{{if not .Categorical}},
           {{.Alias}}_swx / NULLIF({{.Alias}}_sw, 0) AS {{.Alias}}_m
{{- end}}{{end}}
    FROM s1
),
s2 AS (
    SELECT u.run_id, u.adjustment, u.treated
{{- range .Vars}}{{if not .Categorical}},
           SUM(u.w * (u.{{.Alias}} - m.{{.Alias}}_m) * (u.{{.Alias}} - m.{{.Alias}}_m)) AS {{.Alias}}_ss
{{- end}}{{end}}
    FROM u
    JOIN m ON m.run_id = u.run_id AND m.adjustment = u.adjustment AND m.treated = u.treated
    GROUP BY u.run_id, u.adjustment, u.treated
),
{{- end}}
{{- range .Vars}}{{if .Categorical}}
{{.Alias}}_lv AS (
    SELECT DISTINCT run_id, {{.Col}} AS level
    FROM {{$.Cohort}}
    WHERE {{.Col}} IS NOT NULL AND {{template "runs" $}}
),
{{.Alias}}_n AS (
    SELECT run_id, adjustment, treated, {{.Alias}} AS level, SUM(w) AS swl
    FROM u
    WHERE {{.Alias}} IS NOT NULL
    GROUP BY run_id, adjustment, treated, {{.Alias}}
),
{{- end}}{{end}}
st AS (
{{- range $i, $v := .Vars}}{{if $i}}
    UNION ALL{{end}}
{{- if .Categorical}}
    SELECT g.run_id, g.adjustment, g.treated, {{lit .Name}} AS covariate, lv.level,
           COALESCE(n.swl, 0) / NULLIF(g.{{.Alias}}_sw, 0) AS mean,
           (COALESCE(n.swl, 0) - COALESCE(n.swl, 0) * COALESCE(n.swl, 0) / NULLIF(g.{{.Alias}}_sw, 0))
             / NULLIF(g.{{.Alias}}_sw - g.{{.Alias}}_sww / NULLIF(g.{{.Alias}}_sw, 0), 0) AS var
    FROM s1 g
    JOIN {{.Alias}}_lv lv ON lv.run_id = g.run_id
    LEFT JOIN {{.Alias}}_n n ON n.run_id = g.run_id AND n.adjustment = g.adjustment
                            AND n.treated = g.treated AND n.level = lv.level
    WHERE g.{{.Alias}}_sw IS NOT NULL
{{- else}}
    SELECT s1.run_id, s1.adjustment, s1.treated, {{lit .Name}} AS covariate, CAST(NULL AS TEXT) AS level,
           s1.{{.Alias}}_swx / NULLIF(s1.{{.Alias}}_sw, 0) AS mean,
           s2.{{.Alias}}_ss / NULLIF(s1.{{.Alias}}_sw - s1.{{.Alias}}_sww / NULLIF(s1.{{.Alias}}_sw, 0), 0) AS var
    FROM s1
    JOIN s2 ON s2.run_id = s1.run_id AND s2.adjustment = s1.adjustment AND s2.treated = s1.treated
    WHERE s1.{{.Alias}}_sw IS NOT NULL
{{- end}}
{{- end}}
),
pv AS (
    SELECT run_id, covariate, level, adjustment,
           MAX(mean) FILTER (WHERE treated) AS mean_treated,
           MAX(mean) FILTER (WHERE NOT treated) AS mean_control,
           MAX(var) FILTER (WHERE treated) AS var_treated,
           MAX(var) FILTER (WHERE NOT treated) AS var_control
    FROM st
    GROUP BY run_id, covariate, level, adjustment
),
den AS (
    SELECT run_id, covariate, level,
           CASE WHEN level IS NULL
                THEN (var_treated + var_control) / 2
                ELSE (mean_treated * (1 - mean_treated) + mean_control * (1 - mean_control)) / 2
           END AS d2
    FROM pv
    WHERE adjustment = 'unadjusted'
)
SELECT p.run_id, p.covariate, p.level, p.adjustment,
       p.mean_treated, p.mean_control,
       SQRT(CASE WHEN p.var_treated < 0 THEN 0 ELSE p.var_treated END) AS sd_treated,
       SQRT(CASE WHEN p.var_control < 0 THEN 0 ELSE p.var_control END) AS sd_control,
       (p.mean_treated - p.mean_control) / CASE WHEN d.d2 > 0 THEN SQRT(d.d2) END AS smd,
       p.var_treated / NULLIF(p.var_control, 0) AS variance_ratio
FROM pv p
JOIN den d ON d.run_id = p.run_id AND d.covariate = p.covariate
          AND d.level IS NOT DISTINCT FROM p.level
ORDER BY p.run_id, p.covariate, p.level NULLS FIRST, p.adjustment;
{{- end}}

COMMENT ON VIEW {{.View}} IS {{lit .Comment}};
COMMENT ON COLUMN {{.View}}.run_id IS 'run the balance belongs to';
COMMENT ON COLUMN {{.View}}.covariate IS 'covariate name as in the study';
COMMENT ON COLUMN {{.View}}.level IS 'level of a categorical covariate (its 0/1 indicator); NULL for a numeric covariate';
COMMENT ON COLUMN {{.View}}.adjustment IS 'unadjusted, matched (weight = sum of set_weight), or a weighting scheme (units with weight 0 excluded)';
COMMENT ON COLUMN {{.View}}.mean_treated IS 'weighted mean among treated units: sum(w x) / sum(w); a proportion for a level';
COMMENT ON COLUMN {{.View}}.mean_control IS 'weighted mean among comparison units';
COMMENT ON COLUMN {{.View}}.sd_treated IS 'weighted SD among treated units: sqrt(sum(w (x - m)^2) / (sum(w) - sum(w^2) / sum(w))); NULL when undefined';
COMMENT ON COLUMN {{.View}}.sd_control IS 'weighted SD among comparison units, as sd_treated';
COMMENT ON COLUMN {{.View}}.smd IS 'standardised mean difference (mean_treated - mean_control) / d, d the unadjusted pooled SD: sqrt((s_T^2 + s_C^2) / 2), or sqrt((p_T(1 - p_T) + p_C(1 - p_C)) / 2) for a level (Austin 2009); NULL when d = 0';
COMMENT ON COLUMN {{.View}}.variance_ratio IS 'sd_treated^2 / sd_control^2; NULL when the control variance is 0 or undefined';
{{- /* "runs" restricts a scan to the current run when .Current is set. */}}
{{- define "runs"}}{{if .Current}}run_id IN (SELECT run_id FROM cur){{else}}TRUE{{end}}{{end}}
