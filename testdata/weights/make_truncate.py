#!/usr/bin/python3
"""Reference truncated weights for match/weights Truncate tests.

Data: spector_ps.csv (statsmodels' bundled spector data with the scores of
make_spector_ps.py). w = ATE weights z/e + (1-z)/(1-e), set to 0 where
e is outside [0.35, 0.5] (an arbitrary band, chosen so that some units are
restricted out as weights.Restrict would; they must be ignored by the
percentiles and stay 0). For each (low, high) percentile pair, within
each arm separately over the positive weights:
  lo, hi = numpy.percentile(w_arm, [low, high])   (linear interpolation,
           numpy's default = Hyndman & Fan type 7)
  truncated = numpy.clip(w_arm, lo, hi)
Run once: /usr/bin/python3 make_truncate.py -> truncate_reference.json
"""
import json

import numpy as np
import pandas as pd

d = pd.read_csv("spector_ps.csv")
e, z = d.ps.to_numpy(), d.PSI.to_numpy() == 1
w = np.where(z, 1 / e, 1 / (1 - e))
w[(e < 0.35) | (e > 0.5)] = 0
out = {"numpy": np.__version__, "weights": w.tolist(), "z": z.astype(int).tolist(), "cases": []}
for low, high in [(0, 100), (1, 99), (5, 95), (10, 90), (25, 75), (0, 90)]:
    t = w.copy()
    limits = {}
    for arm in (True, False):
        m = (z == arm) & (w > 0)
        lo, hi = np.percentile(w[m], [low, high])
        t[m] = np.clip(w[m], lo, hi)
        limits["treated" if arm else "control"] = [float(lo), float(hi)]
    out["cases"].append({"low": low, "high": high, "limits": limits, "truncated": t.tolist()})
with open("truncate_reference.json", "w") as f:
    json.dump(out, f, indent=1)
print(sum(w == 0), "zero weights;", out["cases"][2]["limits"])
