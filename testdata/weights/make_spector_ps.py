#!/usr/bin/python3
"""Reference propensity scores for match/weights tests.

Source data: the Spector & Mazzeo (1980) data set bundled with Debian's
python3-statsmodels (statsmodels.datasets.spector), 32 students.
Treatment Z = PSI (new teaching method); the score is statsmodels'
Logit maximum-likelihood fit of PSI on const + GPA + TUCE (Newton,
tight tolerance). Written once; Go tests read spector_ps.csv.

Run: /usr/bin/python3 make_spector_ps.py
"""
import csv
import json

import numpy as np
import statsmodels
import statsmodels.api as sm

d = sm.datasets.spector.load_pandas().data
X = sm.add_constant(d[["GPA", "TUCE"]])
fit = sm.Logit(d["PSI"], X).fit(method="newton", tol=1e-14, maxiter=100, disp=0)
ps = fit.predict(X)
score = X.T.values @ (d["PSI"].values - ps.values)  # MLE score equations

with open("spector_ps.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["GPA", "TUCE", "PSI", "GRADE", "ps"])
    for i in range(len(d)):
        w.writerow([repr(float(d.GPA[i])), repr(float(d.TUCE[i])), int(d.PSI[i]),
                    int(d.GRADE[i]), repr(float(ps[i]))])

with open("spector_ps.json", "w") as f:
    json.dump({
        "source": "statsmodels.datasets.spector; statsmodels %s Logit(PSI ~ const + GPA + TUCE)" % statsmodels.__version__,
        "params": {k: float(v) for k, v in fit.params.items()},
        "converged": bool(fit.mle_retvals["converged"]),
        "max_abs_score": float(np.max(np.abs(score))),
    }, f, indent=2)
print(fit.params, np.max(np.abs(score)))
