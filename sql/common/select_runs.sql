{{/* Runs rows newest first. JSON columns come back as text ('' for NULL)
     so that both engines scan them the same way. .Where: "" (all runs),
     "id" (run_id = $1) or "succeeded" (the run the current views show).
     .Limit: append LIMIT $1. .HasSummary: false for a runs table written
     before the summary column existed. */ -}}
SELECT run_id, study, status, started_at, finished_at,
       COALESCE(tool_version, ''), COALESCE(spec_sha256, ''),
       COALESCE(CAST(spec AS TEXT), ''), COALESCE(cohort_sql, ''), COALESCE(cohort_fingerprint, ''),
       COALESCE(CAST(counts AS TEXT), ''), COALESCE(CAST(model AS TEXT), ''),
       COALESCE(CAST(balance AS TEXT), ''), COALESCE(CAST(effects AS TEXT), ''),
       COALESCE(engine, ''), COALESCE(db_user, ''), COALESCE(message, ''),
       {{if .HasSummary}}COALESCE(CAST(summary AS TEXT), ''){{else}}''{{end}}
FROM {{.Runs}}
{{- if eq .Where "id"}}
WHERE run_id = $1
{{- else if eq .Where "succeeded"}}
WHERE status = 'succeeded'
ORDER BY finished_at DESC, run_id DESC
LIMIT 1
{{- end}}
{{- if ne .Where "succeeded"}}
ORDER BY started_at DESC, run_id DESC
{{- end}}
{{- if .Limit}}
LIMIT $1
{{- end}}
