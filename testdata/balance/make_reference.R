#!/usr/bin/Rscript
# Cross-check of the balance reference values with base R (Debian
# r-base-core): weighted.mean() and cov.wt(method = "unbiased"), whose
# unbiased weighted variance is sum w (x-m)^2 / (1 - sum w^2) with w
# normalised to sum 1 -- the reliability-weight formula of match/balance.
# Reads spector.csv and fair.csv written by make_reference.py and writes
# R_reference.csv (dataset, variable, adjustment, arm, mean, var).
# Run: /usr/bin/Rscript make_reference.R
rows <- list()
one <- function(dataset, d, treat, vars) {
  for (v in vars) {
    for (adj in c("unadjusted", "weighted")) {
      for (arm in c(1, 0)) {
        s <- d[[treat]] == arm
        x <- d[[v]][s]
        w <- if (adj == "weighted") d$w[s] else rep(1, sum(s))
        cw <- cov.wt(matrix(x, ncol = 1), wt = w / sum(w), method = "unbiased")
        rows[[length(rows) + 1]] <<- data.frame(
          dataset = dataset, variable = v, adjustment = adj, arm = arm,
          mean = weighted.mean(x, w), var = cw$cov[1, 1])
      }
    }
  }
}
sp <- read.csv("spector.csv")
one("spector", sp, "PSI", c("GPA", "TUCE", "GRADE"))
fa <- read.csv("fair.csv")
for (lv in sort(unique(fa$occupation))) fa[[paste0("occupation=", lv)]] <- as.numeric(fa$occupation == lv)
one("fair", fa, "z", c("age", "yrs_married", "educ", "has_children",
                       paste0("occupation=", sort(unique(fa$occupation)))))
out <- do.call(rbind, rows)
out$mean <- sprintf("%.17g", out$mean); out$var <- sprintf("%.17g", out$var)
write.csv(out, "R_reference.csv", row.names = FALSE, quote = FALSE)
cat(R.version.string, "\n")
