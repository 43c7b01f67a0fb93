SELECT count(*) FROM {{.Table}}
