#!/usr/bin/python3
"""Reference data and values for counterpart/match/score (run once, commit output).

Run from this directory with Debian's python3-statsmodels and python3-scipy:

    /usr/bin/python3 make_reference.py && /usr/bin/Rscript make_reference_glm.R

Writes
  spector.csv      statsmodels' bundled `spector` data (Spector & Mazzeo 1980)
  fair.csv         statsmodels' bundled `fair` data (Fair 1978), with
                   affair = 1 if affairs > 0
  separation.csv   two small hand-made data sets, separated by construction
  statsmodels.json statsmodels Logit fits (coefficients, SEs, log-likelihoods)
  ridge.json       penalised fits by scipy.optimize.minimize

Ridge convention (must match score.Options.Lambda): maximise
    l(b) - (lam/2) * sum_{j>=1} (b_j * sd_j)**2
over the original-scale coefficients b, where l is the logistic
log-likelihood and sd_j the population SD (ddof=0) of column j over all units;
the intercept is not penalised. This equals the penalty lam/2 * sum bt_j**2 on
the coefficients bt of the standardised columns (x_j - mean_j)/sd_j. SEs are
sqrt(diag(H^-1)) with H the Hessian of the penalised negative log-likelihood,
X'WX + lam * diag(0, sd_1**2, ...).
"""
import json

import numpy as np
import pandas as pd
import scipy
import scipy.optimize as so
import statsmodels
import statsmodels.api as sm
from statsmodels.tools.numdiff import approx_hess3


def dummies(df, col):
    """Dummy columns for col, reference = first level in sorted order."""
    levels = sorted(df[col].unique())
    out = pd.DataFrame(index=df.index)
    for lv in levels[1:]:
        out[f"{col}={lv:g}"] = (df[col] == lv).astype(float)
    return out


def logit_fit(y, X):
    res = sm.Logit(y, X).fit(method="newton", maxiter=100, tol=1e-10, disp=0)
    assert res.mle_retvals["converged"]
    return {
        "names": ["(intercept)"] + list(X.columns[1:]),
        "coef": list(map(float, res.params)),
        "se": list(map(float, res.bse)),
        "loglik": float(res.llf),
        "null_loglik": float(res.llnull),
        "iterations": int(res.mle_retvals["iterations"]),
    }


def ridge_fit(y, X, lam):
    """X includes the constant first. Returns coef, se on the original scale."""
    X = np.asarray(X, float)
    y = np.asarray(y, float)
    sd = X[:, 1:].std(axis=0, ddof=0)
    pen = np.concatenate([[0.0], sd**2])

    def f(b):
        eta = X @ b
        return -(y @ eta - np.logaddexp(0, eta).sum()) + 0.5 * lam * (pen * b * b).sum()

    def grad(b):
        e = 1 / (1 + np.exp(-(X @ b)))
        return -(X.T @ (y - e)) + lam * pen * b

    def hess(b):
        e = 1 / (1 + np.exp(-(X @ b)))
        return (X.T * (e * (1 - e))) @ X + lam * np.diag(pen)

    # Minimise on the standardised scale, where the problem is well scaled:
    # trust-region Newton-CG with the exact Hessian, then BFGS as a second opinion.
    mu = X[:, 1:].mean(axis=0)
    Xs = np.column_stack([np.ones(len(y)), (X[:, 1:] - mu) / sd])

    def fs(bt):
        eta = Xs @ bt
        return -(y @ eta - np.logaddexp(0, eta).sum()) + 0.5 * lam * (bt[1:] ** 2).sum()

    def gs(bt):
        e = 1 / (1 + np.exp(-(Xs @ bt)))
        g = -(Xs.T @ (y - e))
        g[1:] += lam * bt[1:]
        return g

    def hs(bt):
        e = 1 / (1 + np.exp(-(Xs @ bt)))
        H = (Xs.T * (e * (1 - e))) @ Xs
        H[1:, 1:] += lam * np.eye(len(bt) - 1)
        return H

    def original(bt):
        return np.concatenate([[bt[0] - (bt[1:] * mu / sd).sum()], bt[1:] / sd])

    b0 = np.zeros(X.shape[1])
    r1 = so.minimize(fs, b0, jac=gs, hess=hs, method="trust-ncg", options={"gtol": 1e-12, "maxiter": 1000})
    # The optimiser stops (sometimes with a warning) once the objective
    # changes at rounding level, about 1e-8 from the optimum for the larger
    # data. Polish by solving the stationarity equations gs = 0 with MINPACK's
    # hybrid Powell method (the objective is strictly convex, so this is the
    # minimum), then bound the distance to the optimum by |H^-1 g|.
    r0 = so.root(gs, r1.x, jac=hs, method="hybr", options={"xtol": 1e-14})
    assert np.max(np.abs(r0.x - r1.x)) < 1e-6, (r0.x, r1.x)
    r1 = r0
    assert np.max(np.abs(np.linalg.solve(hs(r1.x), gs(r1.x)))) < 1e-11, (r1.message, gs(r1.x))
    r2 = so.minimize(fs, b0, jac=gs, method="BFGS", options={"gtol": 1e-9, "maxiter": 10000})
    b, b2 = original(r1.x), original(r2.x)
    assert np.max(np.abs(b - b2) / (np.abs(b) + 1e-3)) < 1e-6, (b, b2)
    # The solution is also a stationary point of the original-scale objective.
    assert np.max(np.abs(grad(b))) < 1e-6, grad(b)
    H = hess(b)
    Hn = approx_hess3(b, f)
    assert np.max(np.abs(H - Hn)) < 1e-6 * np.max(np.abs(H)), (H, Hn)
    se = np.sqrt(np.diag(np.linalg.inv(H)))
    eta = X @ b
    return {
        "lambda": lam,
        "coef": list(map(float, b)),
        "se": list(map(float, se)),
        "loglik": float(y @ eta - np.logaddexp(0, eta).sum()),
        "method": "scipy.optimize.minimize trust-ncg on the standardised scale polished by scipy.optimize.root (hybr) on the gradient, checked against BFGS",
    }


def main():
    versions = {"statsmodels": statsmodels.__version__, "scipy": scipy.__version__,
                "numpy": np.__version__}

    sp = sm.datasets.spector.load_pandas().data[["GPA", "TUCE", "PSI", "GRADE"]]
    sp.to_csv("spector.csv", index=False, float_format="%.17g")

    fr = sm.datasets.fair.load_pandas().data
    fr = pd.DataFrame({
        "rate_marriage": fr["rate_marriage"].astype(int),
        "religious": fr["religious"].astype(int),
        "age": fr["age"],
        "yrs_married": fr["yrs_married"],
        "educ": fr["educ"],
        "affair": (fr["affairs"] > 0).astype(int),
    })
    fr.to_csv("fair.csv", index=False, float_format="%.17g")

    # Separated by construction: complete (x > 5 <=> z = 1) and
    # quasi-complete (the two units at x = 5 overlap, the others do not).
    sep = pd.DataFrame({
        "set": ["complete"] * 10 + ["quasi"] * 10,
        "x": list(range(1, 11)) + [1, 2, 3, 4, 5, 5, 6, 7, 8, 9],
        "z": [0] * 5 + [1] * 5 + [0, 0, 0, 0, 0, 1, 1, 1, 1, 1],
    })
    sep.to_csv("separation.csv", index=False)

    X = sm.add_constant(sp[["GPA", "TUCE", "PSI"]])
    spector = logit_fit(sp["GRADE"], X)
    spector["source"] = "statsmodels Logit on statsmodels.datasets.spector (Spector & Mazzeo 1980)"

    Xf = pd.concat([dummies(fr, "rate_marriage"), dummies(fr, "religious"),
                    fr[["age", "yrs_married", "educ"]]], axis=1)
    Xf = sm.add_constant(Xf)
    fair = logit_fit(fr["affair"], Xf)
    fair["source"] = "statsmodels Logit on statsmodels.datasets.fair (Fair 1978), affair = affairs > 0"

    with open("statsmodels.json", "w") as fh:
        json.dump({"versions": versions, "spector": spector, "fair": fair}, fh, indent=1)
        fh.write("\n")

    ridge = []
    for lam in (1.0, 4.0):
        r = ridge_fit(sp["GRADE"], X, lam)
        r.update(data="spector", names=spector["names"])
        ridge.append(r)
    r = ridge_fit(fr["affair"], Xf, 2.0)
    r.update(data="fair", names=fair["names"])
    ridge.append(r)
    for name in ("complete", "quasi"):
        s = sep[sep["set"] == name]
        r = ridge_fit(s["z"], sm.add_constant(s[["x"]].astype(float)), 1.0)
        r.update(data="separation:" + name, names=["(intercept)", "x"])
        ridge.append(r)
    with open("ridge.json", "w") as fh:
        json.dump({"versions": versions,
                   "convention": "maximise l(b) - lambda/2 * sum_j (b_j*sd_j)^2, sd_j population SD, intercept unpenalised; "
                                 "SE = sqrt(diag(inverse penalised Hessian))",
                   "fits": ridge}, fh, indent=1)
        fh.write("\n")


if __name__ == "__main__":
    main()
