# Reference subclasses and stratified effect estimates for match/assign.
# Run once with Debian's r-base-core:
#   Rscript testdata/assign/make_subclass.R
# Writes subclass.csv: ps (rounded to 2 decimals, so ties fall on the quantile
# breaks), treated, eligible, y, and R's subclass from
# cut(ps, quantile(ps, 0:5/5, type = 7), include.lowest = TRUE, labels = FALSE)
# over the eligible units (0-based, -1 = ineligible); and subclass_effects.csv
# with the stratified estimators (Cochran 1968, Biometrics 24:295;
# Rosenbaum & Rubin 1984, JASA 79:516):
#   ATE = sum_s (n_s / N) (mean_s(y | T) - mean_s(y | C))
#   ATT = sum_s (n_s1 / N_1) (mean_s(y | T) - mean_s(y | C))
set.seed(20261201)
n <- 400
x <- rnorm(n)
ps <- round(plogis(-0.3 + 0.9 * x), 2)
treated <- rbinom(n, 1, ps)
eligible <- rbinom(n, 1, 0.93)
y <- 1 + 2 * x + 1.5 * treated + rnorm(n)
e <- eligible == 1
sub <- rep(-1L, n)
br <- quantile(ps[e], probs = 0:5 / 5, type = 7)
sub[e] <- cut(ps[e], breaks = br, include.lowest = TRUE, labels = FALSE) - 1L
write.csv(data.frame(ps = ps, treated = treated, eligible = eligible, y = y, subclass = sub),
          "testdata/assign/subclass.csv", row.names = FALSE)
ate <- 0; att <- 0
N <- sum(e); N1 <- sum(e & treated == 1)
for (s in 0:4) {
  i <- sub == s
  d <- mean(y[i & treated == 1]) - mean(y[i & treated == 0])
  ate <- ate + sum(i) / N * d
  att <- att + sum(i & treated == 1) / N1 * d
}
write.csv(data.frame(estimand = c("ATE", "ATT"), value = sprintf("%.15g", c(ate, att))),
          "testdata/assign/subclass_effects.csv", row.names = FALSE)
