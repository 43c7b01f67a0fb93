{{/* The ready-made table for weighted queries of the latest succeeded
     run: one row per unit of its cohort snapshot with the unit's scores,
     its matching summary and every scheme's weight.

     Matching with replacement puts a control in several sets, so the view
     keeps one row per unit and summarises its sets: set_id is the
     smallest set id (NULL when unmatched), set_count the number of sets,
     matched_weight the sum of set_weight (0 when unmatched) — the weight
     the balance view's "matched" adjustment uses. The unit's rows of
     {prefix}matches list every set.

     Dropped and recreated rather than replaced: its columns follow the
     study (covariates, outcomes, schemes) and a Postgres view cannot lose
     or reorder columns in CREATE OR REPLACE.
     .View .Runs .Cohort .Scores .Matches .Weights quoted names; .Unit
     quoted unit column; .CohortCols, .Schemes quoted column names;
     .Columns: .Name (quoted) and .ColComment for the comments. */ -}}
DROP VIEW IF EXISTS {{.View}};
CREATE VIEW {{.View}} AS
WITH cur AS (
    SELECT run_id
    FROM {{.Runs}}
    WHERE status = 'succeeded'
    ORDER BY finished_at DESC, run_id DESC
    LIMIT 1
),
ms AS (
    SELECT {{.Unit}} AS unit_key, MIN(set_id) AS set_id, COUNT(*) AS set_count, SUM(set_weight) AS matched_weight
    FROM {{.Matches}}
    WHERE run_id IN (SELECT run_id FROM cur)
    GROUP BY {{.Unit}}
)
SELECT
{{- range $i, $c := .CohortCols}}{{if $i}},{{end}}
    c.{{$c}}
{{- end}},
    s.ps, s.logit_ps, s.in_support,
    ms.set_id, COALESCE(ms.set_count, 0) AS set_count, COALESCE(ms.matched_weight, 0) AS matched_weight
{{- range .Schemes}},
    w.{{.}}
{{- end}}
FROM {{.Cohort}} c
LEFT JOIN {{.Scores}} s ON s.run_id = c.run_id AND s.{{.Unit}} = c.{{.Unit}}
LEFT JOIN ms ON ms.unit_key = c.{{.Unit}}
LEFT JOIN {{.Weights}} w ON w.run_id = c.run_id AND w.{{.Unit}} = c.{{.Unit}}
WHERE c.run_id IN (SELECT run_id FROM cur);
COMMENT ON VIEW {{.View}} IS {{lit .Comment}};
{{- range .Columns}}
COMMENT ON COLUMN {{$.View}}.{{.Name}} IS {{lit .ColComment}};
{{- end}}
