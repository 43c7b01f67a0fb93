{{/* Compares the matched sets of run $1 (a) with run $2 (b), by treated
     unit. A treated unit's controls are the controls of every set it
     belongs to in that run (one set in pair and 1:k matching; a full
     matching set or stratum may hold several treated units).
       kept     treated in both runs with the identical set of controls
       changed  treated in both runs, controls differ
       new      treated in b only
       dropped  treated in a only
     Two controls sets are identical when neither has a (treated, control)
     pair the other lacks. .Matches quoted table, .Unit quoted unit column. */ -}}
WITH
tr AS (
    SELECT DISTINCT run_id, set_id, {{.Unit}} AS t
    FROM {{.Matches}}
    WHERE treated AND run_id IN ($1, $2)
),
ctl AS (
    SELECT DISTINCT tr.run_id, tr.t, m.{{.Unit}} AS c
    FROM tr
    JOIN {{.Matches}} m ON m.run_id = tr.run_id AND m.set_id = tr.set_id AND NOT m.treated
),
ta AS (SELECT DISTINCT t FROM tr WHERE run_id = $1),
tb AS (SELECT DISTINCT t FROM tr WHERE run_id = $2),
both_runs AS (SELECT ta.t FROM ta JOIN tb ON tb.t = ta.t),
differ AS (
    SELECT t FROM (
        SELECT t, c FROM ctl WHERE run_id = $1
        EXCEPT
        SELECT t, c FROM ctl WHERE run_id = $2
    ) x
    UNION
    SELECT t FROM (
        SELECT t, c FROM ctl WHERE run_id = $2
        EXCEPT
        SELECT t, c FROM ctl WHERE run_id = $1
    ) y
)
SELECT
    (SELECT count(*) FROM both_runs WHERE t NOT IN (SELECT t FROM differ)) AS kept,
    (SELECT count(*) FROM both_runs WHERE t IN (SELECT t FROM differ)) AS changed,
    (SELECT count(*) FROM tb WHERE t NOT IN (SELECT t FROM ta)) AS new_sets,
    (SELECT count(*) FROM ta WHERE t NOT IN (SELECT t FROM tb)) AS dropped
