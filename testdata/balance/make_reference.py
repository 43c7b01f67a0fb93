#!/usr/bin/python3
"""Reference balance statistics for match/balance tests.

Data sets bundled with Debian's python3-statsmodels:
  * spector (Spector & Mazzeo 1980), 32 students: treatment PSI;
    covariates GPA, TUCE (continuous), GRADE (binary).
    Weights: overlap weights from statsmodels Logit(PSI ~ const+GPA+TUCE).
  * fair (Fair 1978), first 800 rows: treatment religious >= 3;
    covariates age, yrs_married, educ (continuous), has_children
    (children > 0, binary) and occupation (categorical 1..6, one 0/1
    indicator per level). Weights: ATE inverse-probability weights from
    statsmodels Logit(z ~ const + age + yrs_married + educ + occupation dummies).

Per data set, adjustment (unadjusted / weighted), variable and arm:
  mean      statsmodels DescrStatsW(x, weights=w).mean
  var       numpy.cov(x, aweights=w, ddof=1)  (reliability weights:
            sum w (x-m)^2 / (V1 - V2/V1))
  pooled SD from the unadjusted numpy.var(ddof=1) of each arm (continuous)
            or p(1-p) of each arm (binary), Austin (2009) Stat Med 28:3083
  SMD       (mean_t - mean_c) / pooled SD
  ks        scipy.stats.ks_2samp(x_t, x_c).statistic (unadjusted only)
Written once; Go tests read the CSV and JSON files. make_reference.R
recomputes means and variances with R's weighted.mean and cov.wt.

Run: /usr/bin/python3 make_reference.py
"""
import json

import numpy as np
import scipy
import scipy.stats
import statsmodels
import statsmodels.api as sm
from statsmodels.stats.weightstats import DescrStatsW


def logit_ps(z, X):
    X = sm.add_constant(X)
    fit = sm.Logit(z, X).fit(method="newton", tol=1e-14, maxiter=100, disp=0)
    assert fit.mle_retvals["converged"]
    return np.asarray(fit.predict(X))


def stats(data, z, variables, w):
    out = {}
    t, c = z == 1, z == 0
    for name, binary in variables:
        x = np.asarray(data[name], dtype=float)
        if binary:
            pt, pc = x[t].mean(), x[c].mean()
            pooled = np.sqrt((pt * (1 - pt) + pc * (1 - pc)) / 2)
        else:
            pooled = np.sqrt((np.var(x[t], ddof=1) + np.var(x[c], ddof=1)) / 2)
        for adj, ww in (("unadjusted", np.ones_like(x)), ("weighted", w)):
            mt = DescrStatsW(x[t], weights=ww[t]).mean
            mc = DescrStatsW(x[c], weights=ww[c]).mean
            vt = float(np.cov(x[t], aweights=ww[t], ddof=1))
            vc = float(np.cov(x[c], aweights=ww[c], ddof=1))
            rec = {"mean_t": mt, "mean_c": mc, "var_t": vt, "var_c": vc,
                   "pooled_sd": pooled, "smd": (mt - mc) / pooled,
                   "var_ratio": vt / vc}
            if adj == "unadjusted":
                rec["ks"] = scipy.stats.ks_2samp(x[t], x[c]).statistic
            out.setdefault(adj, {})[name] = {k: float(v) for k, v in rec.items()}
    return out


versions = "statsmodels %s, numpy %s, scipy %s" % (
    statsmodels.__version__, np.__version__, scipy.__version__)

# spector
d = sm.datasets.spector.load_pandas().data
z = d["PSI"].values.astype(int)
ps = logit_ps(d["PSI"], d[["GPA", "TUCE"]])
d["w"] = np.where(z == 1, 1 - ps, ps)
d[["GPA", "TUCE", "GRADE", "PSI", "w"]].to_csv("spector.csv", index=False, float_format="%.17g")
ref = {"source": "statsmodels.datasets.spector; " + versions,
       "weights": "overlap, Logit(PSI ~ const + GPA + TUCE)",
       "stats": stats(d, z, [("GPA", False), ("TUCE", False), ("GRADE", True)], d["w"].values)}
with open("spector.json", "w") as f:
    json.dump(ref, f, indent=1)

# fair
f = sm.datasets.fair.load_pandas().data.iloc[:800].copy()
f["z"] = (f["religious"] >= 3).astype(int)
f["has_children"] = (f["children"] > 0).astype(int)
f["occupation"] = f["occupation"].astype(int)
levels = sorted(f["occupation"].unique())
for lv in levels:
    f["occupation=%d" % lv] = (f["occupation"] == lv).astype(int)
dummies = ["occupation=%d" % lv for lv in levels[1:]]
ps = logit_ps(f["z"], f[["age", "yrs_married", "educ"] + dummies])
f["w"] = np.where(f["z"] == 1, 1 / ps, 1 / (1 - ps))
f[["age", "yrs_married", "educ", "has_children", "occupation", "z", "w"]].to_csv(
    "fair.csv", index=False, float_format="%.17g")
variables = [("age", False), ("yrs_married", False), ("educ", False), ("has_children", True)] + \
    [("occupation=%d" % lv, True) for lv in levels]
ref = {"source": "statsmodels.datasets.fair, rows 1-800; " + versions,
       "weights": "ATE IPW, Logit(religious>=3 ~ const + age + yrs_married + educ + occupation dummies)",
       "stats": stats(f, f["z"].values, variables, f["w"].values)}
with open("fair.json", "w") as fh:
    json.dump(ref, fh, indent=1)
print("ok")
