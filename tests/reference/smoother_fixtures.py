#!/usr/bin/env python3
"""Missing readings' conditional means and variances from the dense covariance
(numpy/scipy only): the reference for lagwise's fixed-interval smoother.

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/smoother_fixtures.py

Writes tests/reference/smoother.json. Model on the original scale: x_t = m_t + z_t with a
known regression part m_t (mean, or drift * t), (1-B)^d (1-B^s)^D z_t = w_t for
t >= delta, w a zero-mean stationary ARMA with innovation variance sigma2
(autocovariances from truncated psi-weights, as in forecast_fixtures.py). The delta
initial values z_0..z_{delta-1} get a diffuse prior (Kohn & Ansley 1986; de Jong 1991):
with z = A u + B w, V = B Cov(w) B', and O/M the observed/missing readings, the
conditional distribution of z_M given z_O is the universal-kriging (GLS) form

    [V_OO  A_O] [L]   [V_OM]
    [A_O'  0  ] [U] = [A_M'],   E[z_M | z_O] = L' z_O,   Var = V_MM - L' V_OM - A_M U

(the best linear predictor unbiased whatever the initial values; V_OO alone is singular
when an initial value is observed), which conditions on every observed reading,
wherever the gaps are. Sign conventions:
phi(B) = 1 - sum phi_i B^i, theta(B) = 1 + sum theta_j B^j.
"""
import json
import os

import numpy as np
from scipy.linalg import cho_factor, cho_solve, toeplitz

from forecast_fixtures import acvf, diff_coefs, expand

HERE = os.path.dirname(os.path.abspath(__file__))


def conditional(x, phi, theta, sigma2, d, D, s, mean=0.0, drift=0.0):
    n = len(x)
    t = np.arange(n, dtype=float)
    reg = mean + drift * t
    z = x - reg
    c = diff_coefs(d, D, s)
    delta = len(c)
    dm = np.zeros((n, n))
    for i in range(n):
        dm[i, i] = 1.0
        if i >= delta:
            for k, ck in enumerate(c):
                dm[i, i - 1 - k] = -ck
    inv = np.linalg.solve(dm, np.eye(n))
    a, b = inv[:, :delta], inv[:, delta:]
    gw = sigma2 * toeplitz(acvf(phi, theta, n - delta))
    v = b @ gw @ b.T
    obs = ~np.isnan(x)
    mis = np.isnan(x)
    voo = v[np.ix_(obs, obs)]
    vom = v[np.ix_(obs, mis)]
    vmm = v[np.ix_(mis, mis)]
    zo = z[obs]
    if delta == 0:
        cf = cho_factor(voo)
        lam = cho_solve(cf, vom)
        mean_m = lam.T @ zo
        var_m = vmm - lam.T @ vom
    else:
        # The bordered (universal kriging) system: V_OO is singular when an initial value
        # is observed (its row of B is zero), the bordered matrix is not.
        ao, am = a[obs], a[mis]
        k = ao.shape[1]
        big = np.block([[voo, ao], [ao.T, np.zeros((k, k))]])
        rhs = np.vstack([vom, am.T])
        sol = np.linalg.solve(big, rhs)
        lam, mu = sol[: voo.shape[0]], sol[voo.shape[0]:]
        mean_m = lam.T @ zo
        var_m = vmm - lam.T @ vom - am @ mu
    idx = np.nonzero(mis)[0]
    return [
        {"index": int(i), "mean": float(mean_m[k] + reg[i]), "sd": float(np.sqrt(var_m[k, k]))}
        for k, i in enumerate(idx)
    ]


def simulate(rng, n, phi, theta, sigma2, d, D, s, mean=0.0, drift=0.0):
    burn = 300
    e = rng.normal(0.0, np.sqrt(sigma2), n + burn)
    w = np.zeros(n + burn)
    for t in range(n + burn):
        acc = e[t]
        for i, p in enumerate(phi):
            if t - 1 - i >= 0:
                acc += p * w[t - 1 - i]
        for j, q in enumerate(theta):
            if t - 1 - j >= 0:
                acc += q * e[t - 1 - j]
        w[t] = acc
    w = w[burn:]
    c = diff_coefs(d, D, s)
    z = np.zeros(n)
    for t in range(n):
        z[t] = w[t] + sum(ck * z[t - 1 - k] for k, ck in enumerate(c) if t - 1 - k >= 0)
    return z + mean + drift * np.arange(n)


def case(name, rng, n, ns_ar, ns_ma, se_ar, se_ma, s, d, D, sigma2, gaps, mean=0.0, drift=0.0):
    phi = expand(ns_ar, se_ar, s, -1.0) if (ns_ar or se_ar) else np.zeros(0)
    theta = expand(ns_ma, se_ma, s, 1.0) if (ns_ma or se_ma) else np.zeros(0)
    x = simulate(rng, n, phi, theta, sigma2, d, D, s, mean, drift)
    for g in gaps:
        x[g] = np.nan
    return {
        "name": name,
        "ar": list(ns_ar), "ma": list(ns_ma), "seasonal_ar": list(se_ar), "seasonal_ma": list(se_ma),
        "period": s, "d": d, "seasonal_d": D, "sigma2": sigma2, "mean": mean, "drift": drift,
        "series": [None if np.isnan(v) else float(v) for v in x],
        "missing": conditional(x, phi, theta, sigma2, d, D, s, mean, drift),
    }


def main():
    rng = np.random.default_rng(20261202)
    r = lambda a, b: list(range(a, b))
    cases = [
        case("ARMA(1,1) + mean", rng, 150, [0.7], [0.4], [], [], 1, 0, 0, 2.0,
             r(0, 2) + r(20, 25) + [60] + r(100, 103) + [149], mean=10.0),
        case("ARIMA(1,1,1), first and last readings missing", rng, 150, [0.5], [-0.3], [], [], 1, 1, 0, 1.0,
             [0] + r(30, 36) + [80, 82] + [149]),
        case("ARIMA(1,1,0) + drift", rng, 120, [0.4], [], [], [], 1, 1, 0, 0.5,
             r(50, 58) + [90], drift=0.1),
        case("SARIMA(1,0,0)x(0,1,1)12, gaps inside", rng, 120, [0.6], [], [], [-0.5], 12, 0, 1, 1.0,
             r(40, 44) + [70, 95] + r(100, 112)),
        case("SARIMA(1,0,0)x(0,1,1)12, a gap in the first cycle", rng, 120, [0.6], [], [], [-0.5], 12, 0, 1, 1.0,
             [3, 4] + r(50, 53)),
        case("SARIMA(0,1,1)x(0,1,1)12", rng, 144, [], [-0.4], [], [-0.6], 12, 1, 1, 0.8,
             r(30, 34) + [77] + r(120, 126)),
        case("SARIMA(1,0,1)x(1,0,0)12 + mean, long gap", rng, 160, [0.5], [0.3], [0.6], [], 12, 0, 0, 1.5,
             r(60, 90), mean=-3.0),
    ]
    out = {
        "source": "tests/reference/smoother_fixtures.py (numpy %s): dense Gaussian conditioning, diffuse initial values" % np.__version__,
        "cases": cases,
    }
    with open(os.path.join(HERE, "smoother.json"), "w") as f:
        json.dump(out, f, indent=1)
    for c in cases:
        print(c["name"], len(c["missing"]), "missing; first:", c["missing"][0])


if __name__ == "__main__":
    main()
