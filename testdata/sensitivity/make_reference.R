#!/usr/bin/Rscript
# Reference values for match/sensitivity tests from R (Debian r-base-core),
# run once after make_sleep.R and make_reference.py; writes R_reference.json.
#
# For each pair file and each direction (sign +1: diff, sign -1: -diff):
#   p_R       wilcox.test(sign*diff, alternative = "greater", exact = FALSE,
#             correct = FALSE)$p.value   (zeros dropped, tie-corrected variance)
#   bound     Rosenbaum (2002, Observational Studies, §4.3.3) upper bound at
#             each Γ in `gammas`, written here independently of the Go code
#             from the formula: p+ = Γ/(1+Γ), E = p+ Σrank, V = p+(1-p+) Σrank²,
#             1 - pnorm((T - E)/sqrt(V)), ranks from rank() (average ties)
#   gamma05   the Γ where that bound equals 0.05, by uniroot (tol 1e-12)
#             on log Γ; NA when not significant at Γ = 1
# McNemar counts from scipy_reference.json: binom.test(T, D, p = Γ/(1+Γ),
#   alternative = "greater")$p.value for each Γ.
gammas <- c(1, 1.25, 1.5, 2, 3, 5)
bound <- function(d, g) {
  d <- d[d != 0]
  r <- rank(abs(d))
  p <- g / (1 + g)
  T <- sum(r[d > 0])
  1 - pnorm((T - p * sum(r)) / sqrt(p * (1 - p) * sum(r^2)))
}
num <- function(x) sprintf("%.17g", x)
json_vec <- function(x) paste0("[", paste(ifelse(is.na(x), "null", num(x)), collapse = ", "), "]")
sr <- c()
for (f in c("sleep.csv", "spector_pairs.csv", "fair_pairs.csv")) {
  d0 <- read.csv(f)$diff
  for (s in c(1, -1)) {
    d <- s * d0
    p <- suppressWarnings(wilcox.test(d, alternative = "greater", exact = FALSE,
                                      correct = FALSE)$p.value)
    b <- sapply(gammas, function(g) bound(d, g))
    g05 <- NA
    if (bound(d, 1) < 0.05) {
      g05 <- exp(uniroot(function(lg) bound(d, exp(lg)) - 0.05, c(0, 10),
                         tol = 1e-12)$root)
    }
    sr <- c(sr, sprintf('  {"file": "%s", "sign": %d, "p_R": %s, "bound": %s, "gamma05": %s}',
                        f, s, num(p), json_vec(b), ifelse(is.na(g05), "null", num(g05))))
  }
}
mc <- c()
counts <- list(c(15, 20), c(60, 100), c(280, 500), c(8, 8), c(3, 10), c(6, 7))
for (td in counts) {
  p <- sapply(gammas, function(g) binom.test(td[1], td[2], p = g / (1 + g),
                                             alternative = "greater")$p.value)
  mc <- c(mc, sprintf('  {"T": %d, "D": %d, "p_R": %s}', td[1], td[2], json_vec(p)))
}
writeLines(c("{", sprintf(' "R": "%s",', R.version.string),
             sprintf(' "gammas": %s,', json_vec(gammas)),
             ' "signed_rank": [', paste(sr, collapse = ",\n"), ' ],',
             ' "mcnemar": [', paste(mc, collapse = ",\n"), ' ]', "}"),
           "R_reference.json")
