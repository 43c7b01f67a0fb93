#!/usr/bin/python3
"""Reference regression-adjusted (augmented) effect estimates for
match/effect.Augmented.

Data: fair (Fair 1978), bundled with Debian's python3-statsmodels, all 6366
rows.
  y        = affairs
  z        = rate_marriage >= 4
  x        = age, yrs_married, educ, religious   (in this column order)
  w        = ATE IPW  z/e + (1-z)/(1-e), e from statsmodels
             Logit(z ~ const + age + yrs_married + educ + religious)
             (Newton, tol 1e-10; the weights only need to be fixed numbers)
  cluster  = 10*occupation + occupation_husb
-> fair_augment.csv (17 significant digits).

For two designs, statsmodels WLS(y, [1, z, x...], weights=w):
  "fair_x4"  all four covariates
  "fair_x1"  age only
the coefficient of z with
  se_hc0  fit(cov_type="HC0")
  se_cr   fit(cov_type="cluster", groups=cluster, use_correction=False)
          times sqrt(G/(G-1)): CR0 with only the G/(G-1) factor, the
          convention match/effect documents (= R sandwich::vcovCL(type="HC0",
          cadjust=TRUE); make_augment.R recomputes everything with R).
The script also recomputes the HC0 and clustered SEs from the sandwich
formula in numpy (lstsq, not normal equations) and asserts agreement to
1e-10 relative, so the JSON holds what the formula in Augmented's doc says.

Run once: /usr/bin/python3 make_augment.py -> fair_augment.csv,
augment_reference.json
"""
import json

import numpy as np
import pandas as pd
import statsmodels
import statsmodels.api as sm

COVS = ["age", "yrs_married", "educ", "religious"]

f = sm.datasets.fair.load_pandas().data.copy()
f["z"] = (f["rate_marriage"] >= 4).astype(int)
Xps = sm.add_constant(f[COVS].astype(float))
lfit = sm.Logit(f["z"], Xps).fit(method="newton", tol=1e-10, maxiter=100, disp=0)
assert lfit.mle_retvals["converged"]
e = np.asarray(lfit.predict(Xps))
f["w"] = np.where(f["z"] == 1, 1 / e, 1 / (1 - e))
f["cluster"] = (10 * f["occupation"] + f["occupation_husb"]).astype(int)
f[["affairs", "z", "w", "cluster"] + COVS].to_csv(
    "fair_augment.csv", index=False, float_format="%.17g")

# Re-read what Go will read, so the reference is computed on exactly the
# rounded values in the CSV.
d = pd.read_csv("fair_augment.csv")


def numpy_sandwich(y, X, w, g):
    sw = np.sqrt(w)
    beta = np.linalg.lstsq(X * sw[:, None], y * sw, rcond=None)[0]
    r = y - X @ beta
    bread = np.linalg.inv(X.T @ (X * w[:, None]))
    s = X * (w * r)[:, None]
    hc0 = bread @ (s.T @ s) @ bread
    u = pd.DataFrame(s).groupby(g).sum().to_numpy()
    G = u.shape[0]
    cr = bread @ (u.T @ u) @ bread * G / (G - 1)
    return beta[1], np.sqrt(hc0[1, 1]), np.sqrt(cr[1, 1])


def case(covs):
    y = d["affairs"].to_numpy(float)
    X = np.column_stack([np.ones(len(d)), d["z"].to_numpy(float)] + [d[c].to_numpy(float) for c in covs])
    w = d["w"].to_numpy(float)
    g = d["cluster"].to_numpy()
    G = len(np.unique(g))
    mod = sm.WLS(y, X, weights=w)
    est = float(mod.fit().params[1])
    hc0 = float(mod.fit(cov_type="HC0").bse[1])
    cr0 = mod.fit(cov_type="cluster", cov_kwds={"groups": g, "use_correction": False})
    cr = float(cr0.bse[1] * np.sqrt(G / (G - 1)))
    b, h, c = numpy_sandwich(y, X, w, g)
    assert abs(b / est - 1) < 1e-10 and abs(h / hc0 - 1) < 1e-10 and abs(c / cr - 1) < 1e-10, (b, est, h, hc0, c, cr)
    return {"covariates": covs, "estimate": est, "se_hc0": hc0, "se_cr": cr,
            "clusters": G, "n": int(len(d))}


ref = {"source": "statsmodels %s WLS on fair (bundled with statsmodels)" % statsmodels.__version__,
       "fair_x4": case(COVS),
       "fair_x1": case(["age"])}
with open("augment_reference.json", "w") as fh:
    json.dump(ref, fh, indent=1)
print(json.dumps(ref, indent=1))
