"""Time Debian python3-statsmodels' Logit on the whole-run benchmark's
design (the same rows counterpart fits: 17 numeric covariates plus
indicators of every non-reference level of c1, c2, c3, first sorted level
as reference, and an intercept). Only the fit is timed, not the CSV load."""
import sys
import time

import numpy as np
import pandas as pd
import statsmodels.api as sm

df = pd.read_csv(sys.argv[1])
cols = [f"x{j:02d}" for j in range(1, 18)]
X = df[cols].astype(float)
for c in ["c1", "c2", "c3"]:
    levels = sorted(df[c].unique())
    for lvl in levels[1:]:
        X[f"{c}={lvl}"] = (df[c] == lvl).astype(float)
X = sm.add_constant(X)
y = df["treated"].astype(float).to_numpy()
t = time.perf_counter()
res = sm.Logit(y, X.to_numpy()).fit(disp=0, method="newton", tol=1e-10)
el = time.perf_counter() - t
print(f"statsmodels Logit: {el:.2f} s, {res.mle_retvals.get('iterations')} iterations, "
      f"{X.shape[0]} rows x {X.shape[1]} columns, llf {res.llf:.6f}")
