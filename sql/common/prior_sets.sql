{{/* The matched sets of run $1, treated units first within a set. */ -}}
SELECT set_id, {{.Unit}}, treated, match_distance, set_weight
FROM {{.Matches}}
WHERE run_id = $1
ORDER BY set_id, treated DESC, {{.Unit}}
