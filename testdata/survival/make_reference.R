# Reference values for match/survival, computed with R's survival package
# (Therneau; shipped with Debian's r-base as r-cran-survival) on open
# datasets that the survival package and R's MASS carry.
#
#   Rscript testdata/survival/make_reference.R   (from the repository root)
#
# Writes, per dataset D:
#   D_data.csv  the rows used: t, e, z, w, cl (weights and clusters are made
#               here so that they are not all 1 and sets span both arms)
#   D_km.csv    survfit rows per arm (weighted counts, S, Greenwood SE of S)
#   D_ref.csv   key,value pairs: horizon summaries, robust SEs, RMST, Cox, zph
# and rates_*.csv inputs for make_reference.py (statsmodels).
suppressMessages(library(survival))
options(digits = 17)
out <- "testdata/survival"

# ps-rank sets: sort by propensity score, cut into consecutive blocks of k,
# so that a set mixes treated and controls like a matched set does.
rank_sets <- function(ps, k) { o <- order(ps); cl <- integer(length(ps)); cl[o] <- (seq_along(ps) - 1) %/% k + 1; cl }

ref <- list()
put <- function(key, value) ref[[key]] <<- value

do_dataset <- function(name, d, horizons) {
  write.csv(d[, c("t", "e", "z", "w", "cl")], file.path(out, paste0(name, "_data.csv")), row.names = FALSE)
  S <- Surv(d$t, d$e)
  # Weighted Greenwood (robust=FALSE: with non-integer weights survfit
  # would otherwise switch to the infinitesimal jackknife by default).
  g <- survfit(S ~ z, data = d, weights = w, robust = FALSE)
  km <- data.frame(arm = rep(c(0, 1), g$strata), time = g$time, n_risk = g$n.risk,
                   n_event = g$n.event, n_censor = g$n.censor, surv = g$surv,
                   se_surv = summary(g, censored = TRUE)$std.err)
  # Robust (infinitesimal-jackknife) SE of S at every row of the table,
  # per row and by cluster.
  r1 <- survfit(S ~ z, data = d, weights = w, robust = TRUE)
  r2 <- survfit(S ~ z, data = d, weights = w, robust = TRUE, cluster = cl)
  stopifnot(all(r1$time == g$time), all(r2$time == g$time))
  # summary() puts std.err on the scale of S whatever the fit's logse.
  km$se_row <- summary(r1, censored = TRUE)$std.err
  km$se_cluster <- summary(r2, censored = TRUE)$std.err
  write.csv(km, file.path(out, paste0(name, "_km.csv")), row.names = FALSE)
  sg <- summary(g, times = horizons, extend = FALSE)
  arm <- ifelse(grepl("z=1", as.character(sg$strata)), 1, 0)
  for (i in seq_along(sg$time)) {
    p <- sprintf("km/arm%d/h%g/", arm[i], sg$time[i])
    put(paste0(p, "surv"), sg$surv[i]); put(paste0(p, "se_greenwood"), sg$std.err[i])
  }
  for (h in horizons) {
    tb <- summary(g, rmean = h)$table
    for (a in 0:1) {
      put(sprintf("rmst/arm%d/h%g/est", a, h), tb[a + 1, "rmean"])
      put(sprintf("rmst/arm%d/h%g/se_greenwood", a, h), tb[a + 1, "se(rmean)"])
    }
  }
  # Infinitesimal-jackknife variance: per row, and by cluster.
  for (cv in c("row", "cluster")) {
    if (cv == "row") r <- survfit(S ~ z, data = d, weights = w, robust = TRUE, influence = TRUE)
    else r <- survfit(S ~ z, data = d, weights = w, robust = TRUE, cluster = cl, influence = TRUE)
    sr <- summary(r, times = horizons, extend = FALSE)
    arm <- ifelse(grepl("z=1", as.character(sr$strata)), 1, 0)
    for (i in seq_along(sr$time)) put(sprintf("km/arm%d/h%g/se_%s", arm[i], sr$time[i], cv), sr$std.err[i])
    # Contrasts from R's own influence matrices (rows = clusters of that
    # arm, columns = the arm's survfit times): S at H, RMST to H, summed per
    # cluster across the two arms.
    ids <- if (cv == "row") seq_len(nrow(d)) else sort(unique(d$cl))
    for (h in horizons) {
      IS <- matrix(0, length(ids), 2); IR <- matrix(0, length(ids), 2); Sh <- c(0, 0); Rh <- c(0, 0)
      for (a in 0:1) {
        inf <- r$influence.surv[[a + 1]]
        # Row names are the cluster values (without clusters: row numbers).
        cid <- as.integer(rownames(inf))
        if (cv == "row") stopifnot(all(cid == which(d$z == a)))
        else stopifnot(all(cid == sort(unique(d$cl[d$z == a]))))
        tt <- r$time[rep(1:2, r$strata) == a + 1]; ss <- r$surv[rep(1:2, r$strata) == a + 1]
        j <- max(which(tt <= h)); Sh[a + 1] <- ss[j]
        row <- match(cid, ids)
        IS[row, a + 1] <- inf[, j]
        # RMST = sum of S over [t_k, min(t_{k+1}, H)); influence likewise.
        keep <- which(tt < h); right <- pmin(c(tt[keep][-1], h), h)
        dlt <- right - tt[keep]
        Rh[a + 1] <- tt[1] + sum(ss[keep] * dlt)  # S = 1 on [0, t_1)
        IR[row, a + 1] <- as.vector(inf[, keep, drop = FALSE] %*% dlt)
      }
      p <- sprintf("contrast/%s/h%g/", cv, h)
      put(paste0(p, "se_surv_diff"), sqrt(sum((IS[, 2] - IS[, 1])^2)))
      put(paste0(p, "se_log_rr"), sqrt(sum((-IS[, 2] / (1 - Sh[2]) + IS[, 1] / (1 - Sh[1]))^2)))
      put(paste0(p, "se_rmst_diff"), sqrt(sum((IR[, 2] - IR[, 1])^2)))
      put(paste0(p, "se_rmst1"), sqrt(sum(IR[, 2]^2)))
      put(paste0(p, "se_rmst0"), sqrt(sum(IR[, 1]^2)))
      put(paste0(p, "rmst1"), Rh[2]); put(paste0(p, "rmst0"), Rh[1])
    }
  }
  for (ties in c("efron", "breslow")) {
    f <- coxph(S ~ z, data = d, weights = w, robust = TRUE, ties = ties)
    fc <- coxph(S ~ z, data = d, weights = w, cluster = cl, ties = ties)
    p <- paste0("cox/", ties, "/")
    put(paste0(p, "coef"), unname(coef(f))); put(paste0(p, "se_model"), sqrt(f$naive.var[1, 1]))
    put(paste0(p, "se_robust"), sqrt(f$var[1, 1])); put(paste0(p, "se_cluster"), sqrt(fc$var[1, 1]))
    put(paste0(p, "loglik"), f$loglik[2]); put(paste0(p, "loglik0"), f$loglik[1])
    zp <- cox.zph(f, transform = "km")
    put(paste0(p, "zph_chisq"), zp$table[1, "chisq"]); put(paste0(p, "zph_p"), zp$table[1, "p"])
  }
  # Unweighted Efron fit by cluster: the reference for PHReg's comparison.
  fu <- coxph(S ~ z, data = d, cluster = cl, ties = "efron")
  put("cox/efron_unweighted/coef", unname(coef(fu))); put("cox/efron_unweighted/se_cluster", sqrt(fu$var[1, 1]))
  kv <- data.frame(key = names(ref), value = sprintf("%.17g", unlist(ref)))
  write.csv(kv, file.path(out, paste0(name, "_ref.csv")), row.names = FALSE, quote = FALSE)
  ref <<- list()
}

# veteran: trt 2 (test) vs 1; ATE inverse-probability weights from a
# logistic score; sets of 4 by score rank.
v <- veteran
v$z <- as.integer(v$trt == 2)
ps <- fitted(glm(z ~ karno + age + celltype + prior + diagtime, family = binomial, data = v))
v$w <- ifelse(v$z == 1, 1 / ps, 1 / (1 - ps))
v$t <- v$time; v$e <- as.integer(v$status == 1); v$cl <- rank_sets(ps, 4)
do_dataset("veteran", v, c(30, 90, 180, 365))

# lung: female vs male; ATT weights; clusters = institution (a real
# grouping that spans both arms).
l <- lung[complete.cases(lung[, c("inst", "ph.ecog", "age")]), ]
l$z <- as.integer(l$sex == 2)
ps <- fitted(glm(z ~ age + ph.ecog + ph.karno, family = binomial, data = l, na.action = na.exclude))
ps[is.na(ps)] <- mean(l$z)
l$w <- ifelse(l$z == 1, 1, ps / (1 - ps))
l$t <- l$time; l$e <- as.integer(l$status == 2); l$cl <- as.integer(l$inst)
do_dataset("lung", l, c(180, 365, 730))

# colon, death records: Lev+5FU vs observation; overlap weights; sets of 3.
cc <- colon[colon$etype == 2 & colon$rx != "Lev" & !is.na(colon$nodes), ]
cc$z <- as.integer(cc$rx == "Lev+5FU")
ps <- fitted(glm(z ~ age + sex + obstruct + nodes + differ + extent, family = binomial, data = cc, na.action = na.exclude))
ps[is.na(ps)] <- mean(cc$z)
cc$w <- ifelse(cc$z == 1, 1 - ps, ps)
cc$t <- cc$time; cc$e <- as.integer(cc$status); cc$cl <- rank_sets(ps, 3)
do_dataset("colon", cc, c(365, 1826))

# Rates. cgd: infections per person over follow-up days, rIFN-g vs
# placebo, ATE weights, clusters = centre.
g1 <- cgd[cgd$enum == 1, ]
cnt <- tapply(cgd$status, cgd$id, sum); ex <- tapply(cgd$tstop, cgd$id, max)
g1$count <- as.numeric(cnt[as.character(g1$id)]); g1$exposure <- as.numeric(ex[as.character(g1$id)])
g1$z <- as.integer(g1$treat == "rIFN-g")
ps <- fitted(glm(z ~ age + sex + steroids + propylac + inherit, family = binomial, data = g1))
g1$w <- ifelse(g1$z == 1, 1 / ps, 1 / (1 - ps)); g1$cl <- as.integer(g1$center)
write.csv(g1[, c("count", "exposure", "z", "w", "cl")], file.path(out, "rates_cgd.csv"), row.names = FALSE)
# MASS Insurance: claims per policy holder, drivers over 35 vs the rest,
# weights by car group, clusters = district.
ins <- MASS::Insurance
ins$count <- ins$Claims; ins$exposure <- ins$Holders
ins$z <- as.integer(ins$Age == ">35"); ins$w <- 0.5 + as.integer(ins$Group) / 4
ins$cl <- as.integer(ins$District)
ins <- ins[ins$exposure > 0, ]
write.csv(ins[, c("count", "exposure", "z", "w", "cl")], file.path(out, "rates_insurance.csv"), row.names = FALSE)
cat("R", R.version.string, "survival", as.character(packageVersion("survival")), "\n")

# Second reference for the rates: R glm(quasipoisson) with prior weights and
# sandwich (Debian r-cran-sandwich): vcovHC(type = "HC0") and vcovCL(type =
# "HC1", cadjust = TRUE), i.e. G/(G-1)·(N-1)/(N-K).
suppressMessages(library(sandwich))
for (nm in c("cgd", "insurance")) {
  r <- read.csv(file.path(out, paste0("rates_", nm, ".csv")))
  m <- glm(count ~ z + offset(log(exposure)), family = quasipoisson, weights = w, data = r)
  kv <- c(log_rr = unname(coef(m)[2]),
          se_hc0 = sqrt(vcovHC(m, type = "HC0")[2, 2]),
          se_cluster = sqrt(vcovCL(m, cluster = ~cl, type = "HC1", cadjust = TRUE)[2, 2]))
  write.csv(data.frame(key = names(kv), value = sprintf("%.17g", kv)),
            file.path(out, paste0("rates_", nm, "_r.csv")), row.names = FALSE, quote = FALSE)
}
