#!/usr/bin/Rscript
# Cross-check of the effect reference values with R (Debian r-base-core,
# r-cran-sandwich): lm(y ~ z, weights = w), whose z coefficient is the
# weighted difference in means, with
#   se_hc0  sandwich::vcovHC(fit, type = "HC0")    meat sum w^2 r^2 x x'
#   se_cr   sandwich::vcovCL(fit, cluster = ~cl, type = "HC0", cadjust = TRUE)
#           CR0 times G/(G-1) -- the convention match/effect documents.
# Reads the CSV files written by make_reference.py; writes R_reference.json.
# Run: /usr/bin/Rscript make_reference.R
library(sandwich)
one <- function(d, y, cl = NULL) {
  d$y <- d[[y]]
  fit <- lm(y ~ z, data = d, weights = w)
  out <- list(estimate = unname(coef(fit)["z"]),
              se_hc0 = sqrt(vcovHC(fit, type = "HC0")["z", "z"]),
              n = nrow(d))
  if (!is.null(cl)) {
    d$cl <- d[[cl]]
    v <- vcovCL(fit, cluster = d$cl, type = "HC0", cadjust = TRUE)
    out$clusters <- length(unique(d$cl))
    out$se_cr <- sqrt(v["z", "z"])
  }
  out
}
s <- read.csv("spector.csv")
m <- read.csv("spector_sets.csv")
f <- read.csv("fair.csv")
ref <- list(
  source = paste(R.version.string, "; sandwich", packageVersion("sandwich")),
  spector_GPA = one(s, "GPA"),
  spector_GRADE = one(s, "GRADE"),
  spector_sets = one(m, "GPA", "set"),
  fair = one(f, "affairs", "cluster"))
writeLines(jsonlite::toJSON(ref, auto_unbox = TRUE, digits = NA, pretty = TRUE), "R_reference.json")
