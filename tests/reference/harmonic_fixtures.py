#!/usr/bin/env python3
"""Regression on harmonic terms with ARMA errors, from the dense covariance (numpy/scipy only).

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/harmonic_fixtures.py

Writes tests/reference/harmonics.json. Model: y_t = x_t' beta + u_t, where x_t holds a
mean (undifferenced cases) and the harmonic columns cos(2 pi k t / P), sin(2 pi k t / P)
for each cycle (t = 0 at the first reading), and u follows a (seasonal) ARIMA model with
the ARMA coefficients FIXED at the values below (they are given, not estimated, so the
reference is closed-form):

- beta by generalised least squares on the differenced series w = D y, Z = D X, with the
  dense stationary ARMA covariance of w (unit innovation variance, autocovariances from
  truncated psi-weights), using the rows where w is present;
- sigma^2 = r' S^-1 r / m (maximum likelihood, m present rows) and the exact Gaussian
  log-likelihood -1/2 (m log(2 pi sigma^2) + log det S + m) of w given beta;
- forecasts of y_{n+j}, j = 1..h: x_{n+j}' beta plus the best linear predictor of u_{n+j}
  given the observed u = y - X beta (first delta readings of u fixed, as in
  forecast_fixtures.py), with the conditional standard deviation over sigma.

The harmonic columns of the forecast steps are computed here from the formula, so the
check covers the library generating future harmonic terms itself. Sign conventions:
phi(B) = 1 - sum phi_i B^i, theta(B) = 1 + sum theta_j B^j.
"""
import json
import os

import numpy as np
from scipy.linalg import toeplitz, cho_factor, cho_solve
from scipy.signal import lfilter

HERE = os.path.dirname(os.path.abspath(__file__))


def expand(ns, se, s, sign):
    a = np.r_[1.0, sign * np.asarray(ns, float)]
    b = np.zeros(len(se) * s + 1)
    b[0] = 1.0
    for i, c in enumerate(se):
        b[(i + 1) * s] = sign * c
    return sign * np.convolve(a, b)[1:]


def acvf(phi, theta, n, m=20000):
    imp = np.zeros(m + n)
    imp[0] = 1.0
    ps = lfilter(np.r_[1.0, theta], np.r_[1.0, -np.asarray(phi, float)], imp)
    return np.array([np.dot(ps[:m], ps[h:h + m]) for h in range(n)])


def diff_coefs(D, s):
    poly = np.array([1.0])
    for _ in range(D):
        f = np.zeros(s + 1)
        f[0] = 1.0
        f[s] = -1.0
        poly = np.convolve(poly, f)
    return -poly[1:]


def design(length, mean, cycles):
    """Columns in the library's term order: mean, then per cycle and harmonic cos, sin."""
    t = np.arange(length, dtype=float)
    cols, labels = [], []
    if mean:
        cols.append(np.ones(length))
        labels.append("mean")
    for period, harmonics in cycles:
        for k in range(1, harmonics + 1):
            cols.append(np.cos(2 * np.pi * k * t / period))
            labels.append(f"cycle{period}.cos.{k}")
            cols.append(np.sin(2 * np.pi * k * t / period))
            labels.append(f"cycle{period}.sin.{k}")
    return np.column_stack(cols), labels


def seasonal_difference(x, D, s):
    for _ in range(D):
        x = x[s:] - x[:-s]
    return x


def blp(u, phi, theta, D, s, h):
    """Best linear predictor of u_{n+1..n+h} (forecast_fixtures.py's construction)."""
    c = diff_coefs(D, s)
    delta = len(c)
    n = len(u)
    total = n + h
    nw = total - delta
    const = np.zeros(total)
    lin = np.zeros((total, nw))
    for t in range(total):
        if t < delta:
            const[t] = u[t]
            continue
        lin[t, t - delta] = 1.0
        for k, ck in enumerate(c, start=1):
            const[t] += ck * const[t - k]
            lin[t] += ck * lin[t - k]
    cov_w = toeplitz(acvf(phi, theta, nw))
    obs = [t for t in range(delta, n) if not np.isnan(u[t])]
    A = lin[obs]
    b = np.array([u[t] - const[t] for t in obs])
    S_oo = A @ cov_w @ A.T
    means, sds = [], []
    for j in range(1, h + 1):
        t = n + j - 1
        a = lin[t]
        s_to = A @ cov_w @ a
        sol = np.linalg.solve(S_oo, s_to)
        means.append(float(const[t] + sol @ b))
        sds.append(float(np.sqrt(a @ cov_w @ a - s_to @ sol)))
    return np.array(means), np.array(sds)


def reference(y, ar, ma, sar, sma, D, s, mean, cycles, h):
    phi = expand(ar, sar, s, -1.0)
    theta = expand(ma, sma, s, 1.0)
    n = len(y)
    X, labels = design(n + h, mean, cycles)
    w = seasonal_difference(y, D, s)
    Z = seasonal_difference(X[:n], D, s)
    rows = np.where(~np.isnan(w))[0]
    S = toeplitz(acvf(phi, theta, len(w)))[np.ix_(rows, rows)]
    cf = cho_factor(S, lower=True)
    Zo, wo = Z[rows], w[rows]
    beta = np.linalg.solve(Zo.T @ cho_solve(cf, Zo), Zo.T @ cho_solve(cf, wo))
    r = wo - Zo @ beta
    m = len(rows)
    sigma2 = float(r @ cho_solve(cf, r) / m)
    logdet = 2.0 * np.sum(np.log(np.diag(cf[0])))
    loglik = -0.5 * (m * np.log(2 * np.pi * sigma2) + logdet + m)
    u = y - X[:n] @ beta
    um, usd = blp(u, phi, theta, D, s, h)
    means = X[n:] @ beta + um
    return labels, beta, sigma2, float(loglik), means, usd


def main():
    rng = np.random.default_rng(2026)
    cases = []
    specs = [
        # name, ar, ma, sar, sma, D, s, mean, cycles, true amplitudes scale, n, gap runs
        ("arma11_daily_weekly", [0.55], [0.25], [], [], 0, 1, True,
         [(96, 2), (672, 1)], 1344, [(200, 30), (700, 5), (1300, 12)]),
        ("ar1_daily_trailing_gap", [0.8], [], [], [], 0, 1, True,
         [(96, 3)], 480, [(100, 4), (476, 4)]),
        ("sarima_weekly", [0.5], [], [], [-0.6], 1, 96, False,
         [(672, 2)], 1344, []),
    ]
    h = 96
    for name, ar, ma, sar, sma, D, s, mean, cycles, n, gaps in specs:
        phi = expand(ar, sar, s, -1.0)
        theta = expand(ma, sma, s, 1.0)
        # Any data would do for the closed-form quantities; a path from the model itself
        # with a daily and weekly shape keeps the numbers realistic.
        e = rng.normal(size=n + 2000) * 0.4
        w = lfilter(np.r_[1.0, theta], np.r_[1.0, -phi], e)[2000:]
        u = w.copy()
        for t in range(s if D else n, n):
            u[t] = w[t] + u[t - s]
        X, _ = design(n, mean, cycles)
        amplitudes = rng.normal(size=X.shape[1])
        if mean:
            amplitudes[0] = 55.0
        y = X @ amplitudes + u
        for start, length in gaps:
            y[start:start + length] = np.nan
        labels, beta, sigma2, loglik, means, sds = reference(
            y, ar, ma, sar, sma, D, s, mean, cycles, h)
        cases.append({
            "name": name, "ar": ar, "ma": ma, "seasonal_ar": sar, "seasonal_ma": sma,
            "D": D, "s": s, "mean": mean,
            "cycles": [[p, k] for p, k in cycles],
            "series": [None if np.isnan(v) else float(v) for v in y],
            "terms": labels, "beta": [float(b) for b in beta],
            "innovation_variance": sigma2, "log_likelihood": loglik,
            "horizon": h, "forecast_mean": [float(v) for v in means],
            "forecast_sd_over_sigma": [float(v) for v in sds],
        })
    with open(os.path.join(HERE, "harmonics.json"), "w") as f:
        json.dump({
            "source": "tests/reference/harmonic_fixtures.py (numpy/scipy dense GLS and best linear predictor)",
            "cases": cases,
        }, f, indent=1)


if __name__ == "__main__":
    main()
