INSERT INTO {{.Runs}} (
    run_id, study, status, started_at, finished_at, tool_version, spec_sha256,
    spec, cohort_sql, cohort_fingerprint, counts, model, balance, effects,
    engine, db_user, message, summary
) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18)
