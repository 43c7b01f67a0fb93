#!/usr/bin/python3
"""Time statsmodels' Logit on the design of BenchmarkFit1M (counterpart/match/score).

Same distribution as the Go benchmark, not the same draws: 1,000,000 units,
20 numeric columns (the first log-normal, the rest N(0,1)), a 6-level uniform
category as 5 dummies (first level the reference), and treatment drawn from
logit P(z=1) = -1 + 0.1 * (sum of the 25 columns).

    /usr/bin/python3 bench_statsmodels.py
"""
import os
import time

import numpy as np
import statsmodels
import statsmodels.api as sm


def main():
    rng = np.random.default_rng(2026)
    n = 1_000_000
    num = rng.standard_normal((n, 20))
    num[:, 0] = np.exp(num[:, 0])
    cat = rng.integers(0, 6, n)
    dum = (cat[:, None] == np.arange(1, 6)[None, :]).astype(float)
    x = np.column_stack([num, dum])
    eta = -1 + 0.1 * x.sum(axis=1)
    z = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
    X = sm.add_constant(x)

    start = time.perf_counter()
    res = sm.Logit(z, X).fit(method="newton", disp=0)
    secs = time.perf_counter() - start
    print(f"statsmodels {statsmodels.__version__} numpy {np.__version__} "
          f"(OMP/BLAS threads: {os.environ.get('OMP_NUM_THREADS', 'default')}): "
          f"Logit newton on {n} x {X.shape[1]}: {secs:.3f} s, "
          f"{res.mle_retvals['iterations']} iterations, converged {res.mle_retvals['converged']}")


if __name__ == "__main__":
    main()
