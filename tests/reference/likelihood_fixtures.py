#!/usr/bin/env python3
"""Dense-covariance Gaussian log-likelihoods of ARMA models (numpy/scipy only).

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/likelihood_fixtures.py

Writes tests/reference/likelihood.json. For each case the autocovariances of the ARMA
process are computed from truncated psi-weights (gamma(h) = sigma^2 sum_j psi_j psi_{j+h},
20000 terms, far past where they vanish for these parameters), the full n x n Toeplitz
covariance is formed, rows/columns of missing readings are dropped, and the log-density is
computed by a Cholesky factorisation. Nothing here uses the state-space form.
Sign conventions: phi(B) = 1 - sum phi_i B^i, theta(B) = 1 + sum theta_j B^j.
"""
import json
import os

import numpy as np
from scipy.linalg import cho_factor, cho_solve, toeplitz

HERE = os.path.dirname(os.path.abspath(__file__))


def expand(nonseasonal, seasonal, period, sign):
    a = np.zeros(len(nonseasonal) + 1)
    a[0] = 1.0
    a[1:] = sign * np.asarray(nonseasonal, dtype=float)
    b = np.zeros(len(seasonal) * period + 1)
    b[0] = 1.0
    for i, c in enumerate(seasonal):
        b[(i + 1) * period] = sign * c
    full = np.convolve(a, b)
    return (sign * full[1:]).tolist()


def psi_weights(phi, theta, m):
    psi = np.zeros(m)
    for j in range(m):
        v = 1.0 if j == 0 else (theta[j - 1] if j - 1 < len(theta) else 0.0)
        for i, p in enumerate(phi):
            if i + 1 > j:
                break
            v += p * psi[j - i - 1]
        psi[j] = v
    return psi


def acvf(phi, theta, sigma2, nlags, m=20000):
    psi = psi_weights(phi, theta, m + nlags)
    return np.array([sigma2 * np.dot(psi[:m], psi[h : h + m]) for h in range(nlags)])


def loglik(x, phi, theta, sigma2):
    x = np.asarray(x, dtype=float)
    n = len(x)
    g = acvf(phi, theta, sigma2, n)
    cov = toeplitz(g)
    keep = ~np.isnan(x)
    cov = cov[np.ix_(keep, keep)]
    xs = x[keep]
    c = cho_factor(cov, lower=True)
    logdet = 2.0 * np.sum(np.log(np.diag(c[0])))
    quad = xs @ cho_solve(c, xs)
    return -0.5 * (keep.sum() * np.log(2 * np.pi) + logdet + quad)


def main():
    rng = np.random.default_rng(20261201)
    cases = []
    grid = [
        ([], []), ([0.5], []), ([], [0.4]), ([0.7], [-0.3]),
        ([0.5, -0.3], [0.4]), ([1.2, -0.5], [0.3, 0.2]), ([0.3, 0.2, 0.1], [0.5, -0.2, 0.1]),
        ([-0.4, 0.1, 0.3], [0.2, 0.3, -0.4]), ([0.95], [0.0]), ([0.0], [0.95]),
        ([0.2], [-0.9]),
    ]
    for phi, theta in grid:
        n = 120
        x = rng.normal(size=n) * 1.3
        for missing in (False, True):
            xm = x.copy()
            if missing:
                xm[[0, 1, 17, 18, 19, 60, n - 1]] = np.nan
            cases.append({
                "label": f"ARMA phi={phi} theta={theta} missing={missing}",
                "phi": [float(v) for v in phi], "theta": [float(v) for v in theta],
                "sigma2": 1.7, "series": [None if np.isnan(v) else float(v) for v in xm],
                "log_likelihood": float(loglik(xm, phi, theta, 1.7)),
            })
    seasonal = [
        ([0.5], [], [], [0.6], 4),
        ([], [0.4], [0.5], [], 12),
        ([0.6], [0.3], [], [-0.5], 12),
        ([], [-0.4], [], [-0.6], 12),
    ]
    for ar, ma, sar, sma, s in seasonal:
        phi = expand(ar, sar, s, -1.0)
        theta = expand(ma, sma, s, 1.0)
        n = 150
        x = rng.normal(size=n)
        for missing in (False, True):
            xm = x.copy()
            if missing:
                xm[[3, 30, 31, 32, 33, 34, 35, 36, 37, 38, 39, 40, 41, 42, 90]] = np.nan
            cases.append({
                "label": f"seasonal ar={ar} ma={ma} sar={sar} sma={sma} s={s} missing={missing}",
                "phi": phi, "theta": theta, "sigma2": 0.8,
                "series": [None if np.isnan(v) else float(v) for v in xm],
                "log_likelihood": float(loglik(xm, phi, theta, 0.8)),
            })
    with open(os.path.join(HERE, "likelihood.json"), "w") as f:
        json.dump({"generator": "tests/reference/likelihood_fixtures.py", "cases": cases}, f, indent=1)


if __name__ == "__main__":
    main()
