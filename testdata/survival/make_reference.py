"""Reference values for match/survival rates, computed with statsmodels
(Debian python3-statsmodels) on the CSVs written by make_reference.R
(R's survival::cgd and MASS::Insurance).

    /usr/bin/python3 testdata/survival/make_reference.py   (from the repo root)

Writes rates_<name>_ref.csv (key,value):
  GLM Poisson, log link, offset log(exposure), var_weights = w:
    log rate ratio, HC0 SE, cluster SE (statsmodels' default small-sample
    correction G/(G-1)·(N-1)/(N-K)); the same fit with freq_weights for
    comparison.
  WLS of count/exposure on z with weights w·exposure, HC0 and cluster: the
    weighted rate difference and its sandwich SE (the WLS normal equations
    give the two arms' weighted rates Σwy/ΣwE exactly).
"""
import csv
import numpy as np
import statsmodels
import statsmodels.api as sm

for name in ["cgd", "insurance"]:
    rows = list(csv.DictReader(open(f"testdata/survival/rates_{name}.csv")))
    y = np.array([float(r["count"]) for r in rows])
    e = np.array([float(r["exposure"]) for r in rows])
    z = np.array([float(r["z"]) for r in rows])
    w = np.array([float(r["w"]) for r in rows])
    cl = np.array([int(r["cl"]) for r in rows])
    X = sm.add_constant(z)
    out = {}
    for wt in ["var", "freq"]:
        kw = {"var_weights": w} if wt == "var" else {"freq_weights": w}
        m = sm.GLM(y, X, family=sm.families.Poisson(), offset=np.log(e), **kw)
        hc0 = m.fit(cov_type="HC0")
        clu = m.fit(cov_type="cluster", cov_kwds={"groups": cl})
        out[f"glm_{wt}/log_rr"] = hc0.params[1]
        out[f"glm_{wt}/log_rate0"] = hc0.params[0]
        out[f"glm_{wt}/se_hc0"] = hc0.bse[1]
        out[f"glm_{wt}/se_cluster"] = clu.bse[1]
    m = sm.WLS(y / e, X, weights=w * e)
    hc0 = m.fit(cov_type="HC0")
    clu = m.fit(cov_type="cluster", cov_kwds={"groups": cl})
    out["wls/rate0"] = hc0.params[0]
    out["wls/rate_diff"] = hc0.params[1]
    out["wls/se_hc0"] = hc0.bse[1]
    out["wls/se_cluster"] = clu.bse[1]
    out["n_groups"] = len(set(cl))
    with open(f"testdata/survival/rates_{name}_ref.csv", "w") as f:
        f.write("key,value\n")
        for k, v in out.items():
            f.write(f"{k},{float(v):.17g}\n")
# Cox model without weights (PHReg takes none): statsmodels PHReg with
# Breslow and Efron ties, model-based SE and the robust SE by cluster
# (fit(groups=cl)). A second reference beside R's coxph.
from statsmodels.duration.hazard_regression import PHReg

for name in ["veteran", "lung", "colon"]:
    rows = list(csv.DictReader(open(f"testdata/survival/{name}_data.csv")))
    t = np.array([float(r["t"]) for r in rows])
    ev = np.array([float(r["e"]) for r in rows])
    z = np.array([float(r["z"]) for r in rows])
    cl = np.array([int(r["cl"]) for r in rows])
    out = {}
    for ties in ["breslow", "efron"]:
        m = PHReg(t, z[:, None], status=ev, ties=ties)
        f = m.fit()
        g = m.fit(groups=cl)
        out[f"phreg_{ties}/coef"] = f.params[0]
        out[f"phreg_{ties}/se_model"] = f.bse[0]
        out[f"phreg_{ties}/se_cluster"] = g.bse[0]
    with open(f"testdata/survival/{name}_phreg.csv", "w") as fh:
        fh.write("key,value\n")
        for k, v in out.items():
            fh.write(f"{k},{float(v):.17g}\n")

print("statsmodels", statsmodels.__version__)
