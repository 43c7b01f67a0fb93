#!/usr/bin/python3
"""Reference Mahalanobis distances for match/assign's Metric.

Run once with Debian's python3-scipy 1.10.1 and python3-numpy 1.24.2:
    /usr/bin/python3 testdata/assign/make_metric_reference.py > testdata/assign/metric_reference.json

The data set (15 units, 3 covariates, ties in every column, a 0/1 column)
is written out in full. For each case the script computes, for every
treated-control pair of eligible units,
scipy.spatial.distance.mahalanobis(x_t, x_c, VI) with

- "mahalanobis": VI = inverse of the pooled within-arm covariance of the
  eligible units, sum of the two arms' centred cross-products over
  (n_1 + n_0 - 2);
- "rank_mahalanobis": the columns replaced by scipy.stats.rankdata
  (average ranks for ties) over the eligible units, numpy.cov of the ranks
  (divisor n - 1), rescaled as in Rosenbaum (2010, Design of Observational
  Studies, section 8.3): cv <- diag(rat) cv diag(rat), rat = sqrt(var(1..n)
  / diag(cv)); VI = numpy.linalg.pinv(cv) (Rosenbaum uses a generalised
  inverse).
"""
import json

import numpy as np
from scipy.spatial.distance import mahalanobis
from scipy.stats import rankdata

X = [
    [52.0, 1.0, 3.1],
    [61.0, 0.0, 2.4],
    [47.0, 1.0, 3.1],
    [70.0, 0.0, 5.0],
    [52.0, 0.0, 1.9],
    [58.0, 1.0, 2.4],
    [66.0, 0.0, 4.2],
    [45.0, 0.0, 3.3],
    [61.0, 1.0, 2.8],
    [49.0, 0.0, 1.2],
    [73.0, 1.0, 4.4],
    [55.0, 0.0, 3.1],
    [60.0, 0.0, 2.0],
    [44.0, 0.0, 2.6],
    [68.0, 1.0, 9.5],
]
TREATED = [1, 0, 1, 1, 0, 1, 0, 0, 1, 0, 1, 0, 0, 0, 1]
MASKS = {
    "all": [1] * 15,
    "subset": [1, 1, 1, 1, 0, 1, 1, 1, 0, 1, 1, 1, 1, 0, 1],
}


def pooled_within(x, z):
    s = np.zeros((x.shape[1], x.shape[1]))
    for arm in (0, 1):
        xa = x[z == arm]
        d = xa - xa.mean(axis=0)
        s += d.T @ d
    return s / (len(x) - 2)


def rank_cov(x):
    r = np.column_stack([rankdata(x[:, j]) for j in range(x.shape[1])])
    cv = np.cov(r, rowvar=False)
    n = len(x)
    rat = np.sqrt(np.var(np.arange(1, n + 1), ddof=1) / np.diag(cv))
    return r, np.diag(rat) @ cv @ np.diag(rat)


cases = []
x_all = np.array(X)
z_all = np.array(TREATED)
for mask_name, mask in MASKS.items():
    units = [i for i in range(15) if mask[i]]
    x, z = x_all[units], z_all[units]
    for kind in ("mahalanobis", "rank_mahalanobis"):
        if kind == "mahalanobis":
            cols, vi = x, np.linalg.inv(pooled_within(x, z))
        else:
            cols, cv = rank_cov(x)
            vi = np.linalg.pinv(cv)
        pairs, dist = [], []
        for a, i in enumerate(units):
            for b, j in enumerate(units):
                if TREATED[i] == 1 and TREATED[j] == 0:
                    pairs.append([i, j])
                    dist.append(float(mahalanobis(cols[a], cols[b], vi)))
        cases.append({"kind": kind, "mask": mask_name, "pairs": pairs, "distances": dist})

print(json.dumps({"x": X, "treated": TREATED, "masks": MASKS, "cases": cases}, indent=None))
