{{/* .View shows the rows of .Table that belong to the latest succeeded run.
     Recreated whenever the table gains columns, because a view's column
     list is fixed when it is created. */ -}}
CREATE OR REPLACE VIEW {{.View}} AS
SELECT *
FROM {{.Table}}
WHERE run_id = (
    SELECT run_id
    FROM {{.Runs}}
    WHERE status = 'succeeded'
    ORDER BY finished_at DESC, run_id DESC
    LIMIT 1
);
COMMENT ON VIEW {{.View}} IS {{lit .Comment}};
