{{/* One table of the output contract with its comments.
     .Table quoted schema.table; .Columns: .Name (quoted), .Type, .Constraint;
     .Checks: table constraints; .Comment and each .ColComment are raw text;
     .PartitionBy: true for a run table kept one partition per run
     (sqlcore/partition.go). */ -}}
CREATE TABLE IF NOT EXISTS {{.Table}} (
{{- range $i, $c := .Columns}}{{if $i}},{{end}}
    {{$c.Name}} {{$c.Type}}{{if $c.Constraint}} {{$c.Constraint}}{{end}}
{{- end}}
{{- range .Checks}},
    {{.}}
{{- end}}
){{if .PartitionBy}} PARTITION BY LIST (run_id){{end}};
COMMENT ON TABLE {{.Table}} IS {{lit .Comment}};
{{- range .Columns}}
COMMENT ON COLUMN {{$.Table}}.{{.Name}} IS {{lit .ColComment}};
{{- end}}
