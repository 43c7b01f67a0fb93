#!/usr/bin/python3
"""Reference values for study.diagnose (counterpart), computed once.

Run: /usr/bin/python3 testdata/report/diagnostics_ref.py
Writes diagnostics_input.csv (a synthetic cohort of 500 units, seed 7) and
diagnostics_ref.json beside this script. Sources:
  - score densities: numpy.histogram(ps, bins=40, range=(0, 1), weights=w,
    density=True) (Debian python3-numpy 1.24);
  - unweighted KS distance: scipy.stats.ks_2samp(...).statistic
    (Debian python3-scipy 1.10);
  - weighted eCDFs and the max / mean |F_T - F_C| over the cohort's distinct
    values: numpy, straight from the definition F(u) = sum_{x_i <= u} w_i / sum w_i;
  - eCDF grid: numpy.quantile(x, k/G, method="inverted_cdf") (Hyndman & Fan
    type 1), k = 1..G-1, G = min(100, n // 10), duplicates removed.
"""
import csv
import json
import os

import numpy as np
from scipy import stats

here = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(7)
n = 500
age = np.round(rng.normal(70, 9, n))                     # integer-valued, ties
bmi = np.round(rng.normal(28, 5, n), 2)                  # near-continuous
visits = rng.poisson(2.0, n).astype(float)               # few distinct values
smoker = (rng.random(n) < 0.3).astype(float)             # 0/1
lin = -8 + 0.1 * age + 0.05 * bmi + 0.2 * visits + 0.5 * smoker
ps = 1 / (1 + np.exp(-lin))
z = rng.random(n) < ps
insup = (ps >= 0.05) & (ps <= 0.95)
# two adjustments: ATT-type odds weights and overlap weights, zero outside support
w_att = np.where(z, 1.0, ps / (1 - ps)) * insup
w_ovl = np.where(z, 1 - ps, ps) * insup

with open(os.path.join(here, "diagnostics_input.csv"), "w", newline="") as f:
    wr = csv.writer(f)
    wr.writerow(["age", "bmi", "visits", "smoker", "treated", "ps", "in_support", "w_att", "w_overlap"])
    for i in range(n):
        wr.writerow([repr(float(age[i])), repr(float(bmi[i])), repr(float(visits[i])), repr(float(smoker[i])),
                     int(z[i]), repr(float(ps[i])), int(insup[i]), repr(float(w_att[i])), repr(float(w_ovl[i]))])

adj = {"unadjusted": np.ones(n), "att": w_att, "overlap": w_ovl}
cov = {"age": age, "bmi": bmi, "visits": visits, "smoker": smoker}


def ecdf(x, w, at):
    return np.array([w[x <= u].sum() for u in at]) / w.sum()


out = {"scores": {}, "distances": {}, "ks_scipy": {}, "grid": {}, "curves": {}}
for name, w in adj.items():
    out["scores"][name] = {
        "treated": np.histogram(ps[z], bins=40, range=(0, 1), weights=w[z], density=True)[0].tolist(),
        "control": np.histogram(ps[~z], bins=40, range=(0, 1), weights=w[~z], density=True)[0].tolist(),
    }
out["scores"]["in support"] = {
    "treated": np.histogram(ps[z & insup], bins=40, range=(0, 1), density=True)[0].tolist(),
    "control": np.histogram(ps[~z & insup], bins=40, range=(0, 1), density=True)[0].tolist(),
}
G = min(100, n // 10)
for c, x in cov.items():
    u = np.unique(x)
    out["ks_scipy"][c] = float(stats.ks_2samp(x[z], x[~z]).statistic)
    q = np.quantile(x, np.arange(1, G) / G, method="inverted_cdf")
    grid = [float(v) for i, v in enumerate(q) if i == 0 or v != q[i - 1]]
    out["grid"][c] = grid
    out["distances"][c] = {}
    out["curves"][c] = {}
    for name, w in adj.items():
        d = np.abs(ecdf(x[z], w[z], u) - ecdf(x[~z], w[~z], u))
        out["distances"][c][name] = {"max": float(d.max()), "mean": float(d.mean())}
        out["curves"][c][name] = {"treated": ecdf(x[z], w[z], grid).tolist(),
                                  "control": ecdf(x[~z], w[~z], grid).tolist()}
out["unadjusted_abs_smd_order"] = sorted(
    ["age", "bmi", "visits"],
    key=lambda c: -abs(cov[c][z].mean() - cov[c][~z].mean()) / np.sqrt((cov[c][z].var(ddof=1) + cov[c][~z].var(ddof=1)) / 2))
with open(os.path.join(here, "diagnostics_ref.json"), "w") as f:
    json.dump(out, f, indent=1)
print("treated", int(z.sum()), "in support", int(insup.sum()))
