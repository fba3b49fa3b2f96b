#!/usr/bin/env python3
"""Full-Hessian parameter covariances of exact ML fits, from the dense Gaussian density,
computed with numpy/scipy only.

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/covariance_fixtures.py

Writes tests/reference/covariance.json, read by tests/regression_reference.rs
(full_covariance_matches_dense_hessian).

For each case: the (differenced) series w ~ N(X beta, sigma^2 Omega(arma)), Omega the
Toeplitz matrix of ARMA autocovariances (truncated psi-weights); the negative
log-likelihood in ALL parameters (ARMA coefficients, regression coefficients, sigma^2;
nothing profiled) is
    nll = n/2 log(2 pi sigma^2) + 1/2 log|Omega| + (w - X beta)' Omega^-1 (w - X beta) / (2 sigma^2).
The MLE comes from the profiled likelihood of mle_fixtures.py (same dense density); the
Hessian of nll at the MLE is taken by central differences (Richardson-extrapolated over
two step sizes) and inverted.
Sign conventions: phi(B) = 1 - sum phi_i B^i, theta(B) = 1 + sum theta_j B^j.
"""
import json
import os

import numpy as np
from scipy.linalg import cho_factor, cho_solve, toeplitz

from mle_fixtures import (
    acvf, admissible, difference, expand, fit_exact, labels, load, regressors, spec_of, split,
)

HERE = os.path.dirname(os.path.abspath(__file__))


def full_nll(params, w, X, spec, k_arma):
    arma = params[:k_arma]
    beta = params[k_arma:-1]
    s2 = params[-1]
    ar, ma, sar, sma = split(arma, spec)
    if s2 <= 0 or not (admissible(ar) and admissible(sar) and admissible(-np.asarray(ma))
                       and admissible(-np.asarray(sma))):
        return np.inf
    phi = expand(ar, sar, spec["s"], -1.0)
    theta = expand(ma, sma, spec["s"], 1.0)
    n = len(w)
    c = cho_factor(toeplitz(acvf(phi, theta, n)), lower=True)
    logdet = 2 * np.sum(np.log(np.diag(c[0])))
    r = w - (np.column_stack(X) @ beta if X else 0.0)
    ss = r @ cho_solve(c, r)
    return 0.5 * (n * np.log(2 * np.pi * s2) + logdet + ss / s2)


def hessian(f, x, rel):
    k = len(x)
    h = rel * np.maximum(np.abs(x), 0.1)
    H = np.zeros((k, k))
    f0 = f(x)
    for i in range(k):
        e = np.zeros(k); e[i] = h[i]
        H[i, i] = (f(x + e) - 2 * f0 + f(x - e)) / h[i] ** 2
        for j in range(i):
            d = np.zeros(k); d[j] = h[j]
            v = (f(x + e + d) - f(x + e - d) - f(x - e + d) + f(x - e - d)) / (4 * h[i] * h[j])
            H[i, j] = H[j, i] = v
    return H


def main():
    cases = [
        ("lake_huron_ar2_mean", "lake_huron_level_1875_1972.csv", spec_of(p=2)),
        ("nile_arma11_mean", "nile_flow_1871_1970.csv", spec_of(p=1, q=1)),
        ("lake_huron_ima11_drift", "lake_huron_level_1875_1972.csv", spec_of(d=1, q=1, drift=True)),
    ]
    out = []
    for name, file, spec in cases:
        x = load(file)
        w = difference(x, spec["d"], spec["D"], spec["s"])
        X = regressors(len(x), spec)
        k = spec["p"] + spec["q"] + spec["P"] + spec["Q"]
        arma, ll, beta, s2 = fit_exact(w, X, spec, [np.zeros(k), np.full(k, 0.3)])
        x0 = np.r_[arma, beta, s2]
        f = lambda v: full_nll(v, w, X, spec, k)
        # Richardson extrapolation of the central-difference Hessian (error O(h^4)).
        H1 = hessian(f, x0, 2e-4)
        H2 = hessian(f, x0, 1e-4)
        H = (4 * H2 - H1) / 3
        cov = np.linalg.inv(H)
        reg = (["mean"] if spec["mean"] else []) + (["drift"] if spec["drift"] else [])
        names = labels(spec) + reg + ["sigma2"]
        out.append({
            "name": name, "data": file, "spec": spec,
            "source": "inverse numerical Hessian of the full dense Gaussian nll at the scipy MLE (tests/reference/covariance_fixtures.py)",
            "estimates": dict(zip(names, map(float, x0))),
            "std_errors": dict(zip(names, map(float, np.sqrt(np.diag(cov))))),
            "covariance": cov.tolist(),
            "names": names,
        })
        print(name, dict(zip(names, np.sqrt(np.diag(cov)))))
    with open(os.path.join(HERE, "covariance.json"), "w") as f:
        json.dump({"generator": "tests/reference/covariance_fixtures.py", "cases": out}, f, indent=1)


if __name__ == "__main__":
    main()
