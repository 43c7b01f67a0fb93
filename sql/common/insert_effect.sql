{{/* One effect estimate, in the publish transaction; NaN arrives as NULL. */ -}}
INSERT INTO {{.Effects}} (
    run_id, outcome, adjustment, estimand, contrast, method, estimate, std_error,
    ci_low, ci_high, p_value, n_treated, n_control, n_missing, e_value, e_value_ci,
    rosenbaum_gamma, horizon
) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16, $17, $18)
