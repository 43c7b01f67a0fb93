// Package sensitivity says how strong an unmeasured confounder would have
// to be to explain away an estimated effect.
//
// Two families of published measures are provided:
//
//   - E-values (VanderWeele & Ding 2017, Ann Intern Med 167:268): the
//     minimum strength of association, on the risk-ratio scale, that an
//     unmeasured confounder would need with both treatment and outcome to
//     move the point estimate (or the confidence limit nearer 1) to the
//     null. Odds ratios and standardised mean differences are converted to
//     the risk-ratio scale first with the approximations of that paper.
//   - Rosenbaum bounds for matched pairs (Rosenbaum 2002, Observational
//     Studies, 2nd ed., ch. 4): the upper bound on the one-sided p-value of
//     a randomisation test when, within a pair, the odds of treatment may
//     differ by a factor of at most Γ because of an unobserved covariate.
//     The signed-rank statistic serves continuous outcomes, McNemar's
//     statistic binary ones; GammaAt-style functions report the Γ at which
//     the bound first reaches α.
//
// Conventions follow gonum's stat: a length mismatch or an argument that is
// out of range by construction (Γ < 1, α outside (0, 0.5)) is a programmer
// error and panics; bad data (non-finite values, no informative pair) is an
// error value.
//
// This package must not estimate effects, match, weight, read or write
// databases, or import counterpart/warehouse: it is a pure function of the
// numbers the effect stage already produced.
package sensitivity
