#!/usr/bin/Rscript
# Cross-check of augment_reference.json with R (Debian r-base-core,
# r-cran-sandwich): lm(affairs ~ z + covariates, weights = w) on
# fair_augment.csv (written by make_augment.py), coefficient of z with
#   se_hc0  sandwich::vcovHC(fit, type = "HC0")
#   se_cr   sandwich::vcovCL(fit, cluster = ~cluster, type = "HC0",
#           cadjust = TRUE)   CR0 times G/(G-1)
# Writes augment_R.json (all digits, jsonlite digits = NA).
# Run: /usr/bin/Rscript make_augment.R
library(sandwich)
f <- read.csv("fair_augment.csv")
one <- function(covs) {
  fit <- lm(reformulate(c("z", covs), "affairs"), data = f, weights = w)
  list(covariates = I(covs),
       estimate = unname(coef(fit)["z"]),
       se_hc0 = sqrt(vcovHC(fit, type = "HC0")["z", "z"]),
       se_cr = sqrt(vcovCL(fit, cluster = f$cluster, type = "HC0", cadjust = TRUE)["z", "z"]),
       clusters = length(unique(f$cluster)),
       n = nrow(f))
}
ref <- list(
  source = paste(R.version.string, "; sandwich", packageVersion("sandwich")),
  fair_x4 = one(c("age", "yrs_married", "educ", "religious")),
  fair_x1 = one("age"))
writeLines(jsonlite::toJSON(ref, auto_unbox = TRUE, digits = NA, pretty = TRUE), "augment_R.json")
