#!/usr/bin/python3
"""Reference values for match/sensitivity tests (scipy), run once.

Pair data (the tests check arithmetic, not causal meaning):
  * sleep.csv   written by make_sleep.R from R's bundled `sleep` data.
  * spector_pairs.csv  from ../effect/spector_sets.csv (spector data bundled
    with statsmodels, matched 1:2 on an overlap score): per set, diff =
    treated GPA minus the mean GPA of its controls; binary pair = treated
    GRADE and the GRADE of the set's first control (from ../effect/spector.csv).
  * fair_pairs.csv  statsmodels' bundled `fair` data (Fair 1978): the first
    300 rows with religious >= 3 paired in file order with the first 300
    rows with religious < 3; diff = affairs(t) - affairs(c) (many exact
    zeros and ties); binary = affairs > 0.

Values (scipy 1.10 from Debian's python3-scipy):
  wilcoxon(diff, zero_method="wilcox", correction=False, method="approx",
           alternative="greater").pvalue   -> signed_rank[*].p_scipy
  binomtest(T, D, p=G/(1+G), alternative="greater").pvalue for G in GAMMAS
           -> mcnemar[*].p_scipy   (the exact Rosenbaum McNemar bound at G)
make_reference.R adds R's wilcox.test / binom.test and the Γ>1 signed-rank
bound from Rosenbaum's formula written independently in R.

Order: /usr/bin/Rscript make_sleep.R; /usr/bin/python3 make_reference.py;
/usr/bin/Rscript make_reference.R
"""
import json

import numpy as np
import pandas as pd
import scipy
import statsmodels.api as sm
from scipy import stats

GAMMAS = [1.0, 1.25, 1.5, 2.0, 3.0, 5.0]

sets = pd.read_csv("../effect/spector_sets.csv")
spec = pd.read_csv("../effect/spector.csv").set_index("unit")
rows = []
for s, g in sets.groupby("set", sort=True):
    t = g[g.z == 1].iloc[0]
    c = g[g.z == 0]
    rows.append({
        "pair": s,
        "diff": repr(float(t.GPA - c.GPA.mean())),
        "treated_event": int(spec.loc[int(t.unit), "GRADE"]),
        "control_event": int(spec.loc[int(c.iloc[0].unit), "GRADE"]),
    })
pd.DataFrame(rows).to_csv("spector_pairs.csv", index=False)

fair = sm.datasets.fair.load_pandas().data
tr = fair[fair.religious >= 3].iloc[:300].reset_index(drop=True)
co = fair[fair.religious < 3].iloc[:300].reset_index(drop=True)
pd.DataFrame({
    "pair": range(300),
    "diff": [repr(float(a - b)) for a, b in zip(tr.affairs, co.affairs)],
    "treated_event": (tr.affairs > 0).astype(int),
    "control_event": (co.affairs > 0).astype(int),
}).to_csv("fair_pairs.csv", index=False)

out = {"scipy": scipy.__version__, "gammas": GAMMAS, "signed_rank": [], "mcnemar": []}
for name in ["sleep", "spector_pairs", "fair_pairs"]:
    df = pd.read_csv(name + ".csv")
    d = df["diff"].to_numpy(dtype=float)
    r = stats.wilcoxon(d, zero_method="wilcox", correction=False,
                       method="approx", alternative="greater")
    nz = d[d != 0]
    rk = stats.rankdata(np.abs(nz))
    out["signed_rank"].append({
        "file": name + ".csv", "n": int(len(nz)), "nzero": int((d == 0).sum()),
        "T": float(rk[nz > 0].sum()), "p_scipy": float(r.pvalue)})
    if "treated_event" in df:
        te, ce = df.treated_event.to_numpy(), df.control_event.to_numpy()
        D = int((te != ce).sum())
        T = int(((te == 1) & (ce == 0)).sum())
        if D > 0:  # binomtest needs at least one discordant pair
            out["mcnemar"].append({"file": name + ".csv", "T": T, "D": D})
# Fixed counts, including a large D and T = D.
for T, D in [(15, 20), (60, 100), (280, 500), (8, 8), (3, 10)]:
    out["mcnemar"].append({"T": T, "D": D})
for m in out["mcnemar"]:
    m["p_scipy"] = [float(stats.binomtest(m["T"], m["D"], p=g / (1 + g),
                                          alternative="greater").pvalue)
                    for g in GAMMAS]
with open("scipy_reference.json", "w") as f:
    json.dump(out, f, indent=1)
print(json.dumps(out, indent=1))
