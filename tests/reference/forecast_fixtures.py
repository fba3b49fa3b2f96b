#!/usr/bin/env python3
"""Exact best linear predictors from the dense covariance (numpy/scipy only).

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/forecast_fixtures.py

Writes tests/reference/forecasts.json. Model: y_t = w_t + sum_k c_k y_{t-k} for t >= delta
(c from (1-B)^d (1-B^s)^D), with the first delta readings fixed and w a zero-mean
stationary ARMA with unit innovation variance (autocovariances from truncated
psi-weights). Every reading y_t is then a known constant plus a linear combination of
W = (w_delta, ..., w_{n+h-1}); the forecast of y_{n+j} is the conditional mean of its
combination given the observed readings, and its standard deviation the square root of
the conditional variance (Gaussian conditioning with the full covariance of W). Missing
readings are simply not conditioned on. Sign conventions: phi(B) = 1 - sum phi_i B^i,
theta(B) = 1 + sum theta_j B^j.
"""
import json
import os

import numpy as np
from scipy.linalg import toeplitz
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


def diff_coefs(d, D, s):
    poly = np.array([1.0])
    for _ in range(d):
        poly = np.convolve(poly, [1.0, -1.0])
    for _ in range(D):
        f = np.zeros(s + 1)
        f[0] = 1.0
        f[s] = -1.0
        poly = np.convolve(poly, f)
    return -poly[1:]


def reference(y, phi, theta, d, D, s, h):
    c = diff_coefs(d, D, s)
    delta = len(c)
    n = len(y)
    total = n + h
    nw = total - delta
    # y_t = const_t + L_t . W
    const = np.zeros(total)
    lin = np.zeros((total, nw))
    for t in range(total):
        if t < delta:
            const[t] = y[t]
            continue
        lin[t, t - delta] = 1.0
        for k, ck in enumerate(c, start=1):
            const[t] += ck * const[t - k]
            lin[t] += ck * lin[t - k]
    cov_w = toeplitz(acvf(phi, theta, nw))
    obs = [t for t in range(delta, n) if not np.isnan(y[t])]
    A = lin[obs]
    b = np.array([y[t] - const[t] for t in obs])
    S_oo = A @ cov_w @ A.T
    means, sds = [], []
    for j in range(1, h + 1):
        t = n + j - 1
        a = lin[t]
        s_to = A @ cov_w @ a
        sol = np.linalg.solve(S_oo, s_to)
        means.append(float(const[t] + sol @ b))
        sds.append(float(np.sqrt(a @ cov_w @ a - s_to @ sol)))
    return means, sds


def main():
    rng = np.random.default_rng(99)
    cases = []
    specs = [
        ("arma11", [0.6], [0.3], [], [], 0, 0, 1, 80, []),
        ("ar2_trailing_gap", [0.9, -0.3], [], [], [], 0, 0, 1, 70, [67, 68, 69]),
        ("arma22_gaps", [0.5, 0.2], [0.4, -0.3], [], [], 0, 0, 1, 90, [10, 11, 40, 88]),
        ("arima111", [0.5], [0.3], [], [], 1, 0, 1, 60, []),
        ("arima011_trailing_gap", [], [-0.4], [], [], 1, 0, 1, 60, [57, 59]),
        ("arima021", [], [0.2], [], [], 2, 0, 1, 50, []),
        ("sarima_s4", [0.4], [], [], [-0.5], 0, 1, 4, 64, [30, 61]),
    ]
    for name, ar, ma, sar, sma, d, D, s, n, gaps in specs:
        phi = expand(ar, sar, s, -1.0)
        theta = expand(ma, sma, s, 1.0)
        # Simulate a path from the model itself (any data would do for the predictor).
        c = diff_coefs(d, D, s)
        delta = len(c)
        w = lfilter(np.r_[1.0, theta], np.r_[1.0, -phi], rng.normal(size=n + 500))[500:]
        y = np.zeros(n)
        for t in range(n):
            y[t] = (rng.normal() * 3 + 20) if t < delta else w[t] + sum(c[k - 1] * y[t - k] for k in range(1, delta + 1))
        if delta == 0:
            y = w.copy()
        y[gaps] = np.nan
        means, sds = reference(y, phi, theta, d, D, s, 12)
        cases.append({
            "name": name, "ar": ar, "ma": ma, "seasonal_ar": sar, "seasonal_ma": sma,
            "d": d, "D": D, "s": s, "series": [None if np.isnan(v) else float(v) for v in y],
            "horizon": 12, "mean": means, "sd_over_sigma": sds,
        })
    with open(os.path.join(HERE, "forecasts.json"), "w") as f:
        json.dump({"generator": "tests/reference/forecast_fixtures.py", "cases": cases}, f, indent=1)


if __name__ == "__main__":
    main()
