#!/usr/bin/python3
"""Writes test/reference/sklearn/linear.json: ridge and lasso fits of scikit-learn on the
diabetes data, the reference for trainer/learn.

    /usr/bin/python3 test/reference/sklearn/linear.py > test/reference/sklearn/linear.json

Needs Debian's python3-sklearn (made with scikit-learn 1.2.1). Data: the diabetes data set that
ships with scikit-learn (Efron, Hastie, Johnstone & Tibshirani 2004, "Least angle regression",
Annals of Statistics 32), 442 patients, 10 baseline variables as load_diabetes() returns them
(each column centred and scaled to unit Euclidean norm), target a disease progression measure.
The data is written into the fixture so the Go test needs no Python.

Fits written:
  ridge         Ridge(alpha, fit_intercept=True, solver="cholesky") on X as loaded
  ridge_std     the same on StandardScaler().fit_transform(X)
  lasso         Lasso(alpha, tol=1e-12, max_iter=10**6) at fractions of alpha_max
  lasso_std     the same on the standardised X
  path          lasso_path on the centred X and y (eps=1e-3, n_alphas=100, tol=1e-12): the
                penalty grid and the coefficients along it
"""
import json

import numpy as np
import sklearn
from sklearn.datasets import load_diabetes
from sklearn.linear_model import Lasso, Ridge, lasso_path
from sklearn.preprocessing import StandardScaler

X, y = load_diabetes(return_X_y=True)
Xs = StandardScaler().fit_transform(X)
n = X.shape[0]


def alpha_max(A):
    Ac = A - A.mean(axis=0)
    return float(np.max(np.abs(Ac.T @ (y - y.mean()))) / n)


def ridge_fits(A):
    out = []
    for a in [0.01, 0.1, 1.0, 10.0, 100.0]:
        m = Ridge(alpha=a, fit_intercept=True, solver="cholesky").fit(A, y)
        out.append({"alpha": a, "intercept": float(m.intercept_), "coef": m.coef_.tolist()})
    return out


def lasso_fits(A):
    amax = alpha_max(A)
    out = []
    for frac in [0.5, 0.1, 0.02, 0.005, 0.0005]:
        a = amax * frac
        m = Lasso(alpha=a, fit_intercept=True, tol=1e-12, max_iter=10**6).fit(A, y)
        out.append({"alpha": a, "intercept": float(m.intercept_), "coef": m.coef_.tolist()})
    return {"alpha_max": amax, "fits": out}


Xc = X - X.mean(axis=0)
yc = y - y.mean()
alphas, coefs, _ = lasso_path(Xc, yc, eps=1e-3, n_alphas=100, tol=1e-12, max_iter=10**6)

out = {
    "source": "scikit-learn %s (Debian python3-sklearn), load_diabetes()" % sklearn.__version__,
    "X": X.tolist(),
    "y": y.tolist(),
    "ridge": ridge_fits(X),
    "ridge_std": ridge_fits(Xs),
    "lasso": lasso_fits(X),
    "lasso_std": lasso_fits(Xs),
    "path": {"alphas": alphas.tolist(), "coefs": coefs.T.tolist()},
}
print(json.dumps(out, indent=None, separators=(",", ":")))
