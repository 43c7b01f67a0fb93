{{/* A column the study gained since the table was created (a new covariate,
     outcome or weighting scheme). Older runs hold NULL in it. */ -}}
ALTER TABLE {{.Table}} ADD COLUMN {{.Name}} {{.Type}};
COMMENT ON COLUMN {{.Table}}.{{.Name}} IS {{lit .ColComment}};
