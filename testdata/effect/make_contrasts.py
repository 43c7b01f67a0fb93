#!/usr/bin/python3
"""Reference binary contrasts (risk ratio, odds ratio) for match/effect tests.

Inputs are the existing files of this directory (see make_reference.py):
  * spector.csv: y = GRADE, z, w = overlap weights; HC0.
  * spector_sets.csv joined with spector.csv's GRADE by unit; w = set
    weights; cluster = set.
  * fair.csv: y = affairs > 1 (a binary outcome derived from Fair's data),
    w = ATE IPW; HC0 and cluster = cluster.

For each case, statsmodels GLM(y, [1, z], family=Binomial(link), var_weights=w):
  link Log   -> coefficient of z = log RR, its SE
  link Logit -> coefficient of z = log OR, its SE
fitted with cov_type="HC0", or cov_type="cluster" (use_correction=False)
times sqrt(G/(G-1)), the convention match/effect documents.
The script asserts that the GLM coefficients equal log(p1/p0) and
logit(p1) - logit(p0) of the weighted risks, and that the GLM SEs equal the
delta-method SEs computed here in numpy from the influence terms (relative
1e-6), the claim in effect.Contrasts' doc comment. It also records the
freq_weights fit for comparison (same point estimate).

Run once: /usr/bin/python3 make_contrasts.py -> contrasts_reference.json
"""
import json

import numpy as np
import pandas as pd
import statsmodels
import statsmodels.api as sm

links = sm.families.links


def glm(y, z, w, link, cluster=None, freq=False):
    X = sm.add_constant(z.astype(float))
    kw = {"freq_weights": w} if freq else {"var_weights": w}
    mod = sm.GLM(y.astype(float), X, family=sm.families.Binomial(link=link), **kw)
    if cluster is None:
        fit = mod.fit(cov_type="HC0", tol=1e-14, maxiter=200)
        adj = 1.0
    else:
        G = len(np.unique(cluster))
        fit = mod.fit(cov_type="cluster", cov_kwds={"groups": cluster, "use_correction": False},
                      tol=1e-14, maxiter=200)
        adj = np.sqrt(G / (G - 1))
    return float(fit.params[1]), float(fit.bse[1] * adj)


def delta(y, z, w, cluster=None):
    t, c = z == 1, z == 0
    p1 = np.sum(w[t] * y[t]) / np.sum(w[t])
    p0 = np.sum(w[c] * y[c]) / np.sum(w[c])
    base = np.where(t, w * (y - p1) / np.sum(w[t]), -w * (y - p0) / np.sum(w[c]))
    out = {}
    for name, dT, dC in [("rr", 1 / p1, 1 / p0), ("or", 1 / (p1 * (1 - p1)), 1 / (p0 * (1 - p0)))]:
        inf = base * np.where(t, dT, dC)
        if cluster is None:
            v = np.sum(inf ** 2)
        else:
            s = pd.Series(inf).groupby(cluster).sum().to_numpy()
            v = np.sum(s ** 2) * len(s) / (len(s) - 1)
        out[name] = np.sqrt(v)
    return p1, p0, out


def case(name, y, z, w, cluster=None):
    y, z, w = np.asarray(y, float), np.asarray(z, int), np.asarray(w, float)
    p1, p0, se = delta(y, z, w, cluster)
    lrr, se_rr = glm(y, z, w, links.Log(), cluster)
    lor, se_or = glm(y, z, w, links.Logit(), cluster)
    assert abs(lrr - np.log(p1 / p0)) < 1e-9, (name, lrr, np.log(p1 / p0))
    assert abs(lor - (np.log(p1 / (1 - p1)) - np.log(p0 / (1 - p0)))) < 1e-9
    assert abs(se_rr / se["rr"] - 1) < 1e-6, (name, se_rr, se["rr"])
    assert abs(se_or / se["or"] - 1) < 1e-6, (name, se_or, se["or"])
    _, se_rr_freq = glm(y, z, w, links.Log(), cluster, freq=True)
    return {"p1": p1, "p0": p0, "log_rr": lrr, "se_log_rr": se_rr,
            "log_or": lor, "se_log_or": se_or, "se_log_rr_freq_weights": se_rr_freq,
            "clustered": cluster is not None}


ref = {"source": "statsmodels %s GLM Binomial(Log / Logit) var_weights, HC0 / cluster"
       % statsmodels.__version__}
s = pd.read_csv("spector.csv")
ref["spector"] = case("spector", s.GRADE, s.z, s.w)
m = pd.read_csv("spector_sets.csv").merge(s[["unit", "GRADE"]], on="unit")
m = m.sort_values(["set", "z"], ascending=[True, False], kind="stable")
ref["spector_sets"] = case("spector_sets", m.GRADE, m.z, m.w, m["set"].to_numpy())
f = pd.read_csv("fair.csv")
yb = (f.affairs > 1).astype(int)
ref["fair_hc0"] = case("fair", yb, f.z, f.w)
ref["fair_cluster"] = case("fair", yb, f.z, f.w, f.cluster.to_numpy())
with open("contrasts_reference.json", "w") as fh:
    json.dump(ref, fh, indent=1)
print(json.dumps(ref, indent=1))
