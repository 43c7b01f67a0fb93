#!/usr/bin/python3
"""Reference effect estimates and sandwich SEs for match/effect tests.

Data sets bundled with Debian's python3-statsmodels:
  * spector (Spector & Mazzeo 1980): z = PSI, y = GPA (and GRADE),
    w = overlap weights from statsmodels Logit(PSI ~ const + TUCE).
    -> spector.csv
  * spector matched sample: each treated student with the 2 controls
    closest on that score (with replacement; ties to the lower row),
    one row per set appearance; w = 1 for the treated row, 1/2 per control
    row; cluster = set. -> spector_sets.csv
  * fair (Fair 1978), rows 1-800: z = religious >= 3, y = affairs,
    w = ATE IPW from Logit(z ~ const + age + yrs_married + educ),
    cluster = 10*occupation + occupation_husb. -> fair.csv

For each case, statsmodels WLS(y, [1, z], weights=w):
  estimate  coefficient of z
  se_hc0    fit(cov_type="HC0")
  se_cr     fit(cov_type="cluster", groups=cluster, use_correction=False)
            times sqrt(G/(G-1)): CR0 with only the G/(G-1) factor, the
            convention match/effect documents.
make_reference.R recomputes them with R lm + sandwich. Written once;
Go tests read the CSV and JSON files.

Run: /usr/bin/python3 make_reference.py
"""
import json

import numpy as np
import pandas as pd
import statsmodels
import statsmodels.api as sm


def logit_ps(z, X):
    X = sm.add_constant(X)
    fit = sm.Logit(z, X).fit(method="newton", tol=1e-14, maxiter=100, disp=0)
    assert fit.mle_retvals["converged"]
    return np.asarray(fit.predict(X))


def reference(d, y, cluster=None):
    X = sm.add_constant(d["z"].astype(float))
    mod = sm.WLS(d[y].astype(float), X, weights=d["w"])
    out = {"estimate": float(mod.fit().params["z"]),
           "se_hc0": float(mod.fit(cov_type="HC0").bse["z"]),
           "n": int(len(d))}
    if cluster is not None:
        g = d[cluster].values
        G = len(np.unique(g))
        cr0 = mod.fit(cov_type="cluster", cov_kwds={"groups": g, "use_correction": False})
        out["clusters"] = G
        out["se_cr"] = float(cr0.bse["z"] * np.sqrt(G / (G - 1)))
    return out


ref = {"source": "statsmodels %s WLS; data bundled with statsmodels" % statsmodels.__version__}

s = sm.datasets.spector.load_pandas().data
s["z"] = s["PSI"].astype(int)
ps = logit_ps(s["PSI"], s[["TUCE"]])
s["ps"] = ps
s["w"] = np.where(s["z"] == 1, 1 - ps, ps)
s["unit"] = np.arange(len(s))
s[["unit", "GPA", "GRADE", "z", "w", "ps"]].to_csv("spector.csv", index=False, float_format="%.17g")
ref["spector_GPA"] = reference(s, "GPA")
ref["spector_GRADE"] = reference(s, "GRADE")

rows = []
controls = s[s.z == 0]
for set_id, (_, t) in enumerate(s[s.z == 1].iterrows()):
    dist = (controls["ps"] - t["ps"]).abs()
    order = sorted(range(len(controls)), key=lambda j: (dist.iloc[j], controls["unit"].iloc[j]))[:2]
    rows.append({"set": set_id, "unit": int(t["unit"]), "z": 1, "GPA": t["GPA"], "w": 1.0})
    for j in order:
        c = controls.iloc[j]
        rows.append({"set": set_id, "unit": int(c["unit"]), "z": 0, "GPA": c["GPA"], "w": 0.5})
m = pd.DataFrame(rows)
m.to_csv("spector_sets.csv", index=False, float_format="%.17g")
ref["spector_sets"] = reference(m, "GPA", cluster="set")

f = sm.datasets.fair.load_pandas().data.iloc[:800].copy()
f["z"] = (f["religious"] >= 3).astype(int)
ps = logit_ps(f["z"], f[["age", "yrs_married", "educ"]])
f["w"] = np.where(f["z"] == 1, 1 / ps, 1 / (1 - ps))
f["cluster"] = (10 * f["occupation"] + f["occupation_husb"]).astype(int)
f[["affairs", "z", "w", "cluster"]].to_csv("fair.csv", index=False, float_format="%.17g")
ref["fair"] = reference(f, "affairs", cluster="cluster")

with open("statsmodels_reference.json", "w") as fh:
    json.dump(ref, fh, indent=1)
print(json.dumps(ref, indent=1))
