#!/usr/bin/Rscript
# Reference values from R's glm (binomial, logit link) for counterpart/match/score.
# Run after make_reference.py, from this directory:  /usr/bin/Rscript make_reference_glm.R
# Reads spector.csv, fair.csv and separation.csv written by make_reference.py; writes glm.json.
# glm's convergence tolerance is tightened (epsilon = 1e-14) so the values are
# accurate well beyond the 1e-6 the Go tests ask for.
suppressMessages(library(jsonlite))

ctl <- glm.control(epsilon = 1e-14, maxit = 100)

fit <- function(formula, data, source) {
  m <- glm(formula, family = binomial(link = "logit"), data = data, control = ctl)
  stopifnot(m$converged)
  s <- summary(m)$coefficients
  list(names = c("(intercept)", rownames(s)[-1]),
       coef = unname(s[, 1]), se = unname(s[, 2]),
       loglik = as.numeric(logLik(m)),
       null_loglik = -m$null.deviance / 2, # binary outcome: saturated log-likelihood is 0
       iterations = m$iter, source = source)
}

sp <- read.csv("spector.csv")
spector <- fit(GRADE ~ GPA + TUCE + PSI, sp,
               "R glm(binomial) on statsmodels.datasets.spector (Spector & Mazzeo 1980)")

fr <- read.csv("fair.csv")
# factor() sorts the levels, so the reference level is the smallest code.
fr$rate_marriage <- factor(fr$rate_marriage)
fr$religious <- factor(fr$religious)
options(contrasts = c("contr.treatment", "contr.poly"))
fair <- fit(affair ~ rate_marriage + religious + age + yrs_married + educ, fr,
            "R glm(binomial) on statsmodels.datasets.fair (Fair 1978), affair = affairs > 0")
# Same spelling of dummy names as the Go test and statsmodels.json.
fair$names <- sub("^(rate_marriage|religious)([0-9]+)$", "\\1=\\2", fair$names)

# glm on the separated sets: record its warnings as evidence that they are separated.
sep <- read.csv("separation.csv")
separation <- list()
for (set in c("complete", "quasi")) {
  w <- character()
  withCallingHandlers(
    glm(z ~ x, family = binomial, data = sep[sep$set == set, ]),
    warning = function(c) { w <<- c(w, conditionMessage(c)); invokeRestart("muffleWarning") })
  separation[[set]] <- list(warnings = I(w))
}

out <- list(version = R.version.string, spector = spector, fair = fair, separation = separation)
writeLines(toJSON(out, auto_unbox = TRUE, digits = NA, pretty = TRUE), "glm.json")
