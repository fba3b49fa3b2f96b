#!/usr/bin/env python3
"""Maximum-likelihood (and conditional-sum-of-squares) reference fits on open datasets,
computed with numpy/scipy only, from the dense Gaussian likelihood.

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/mle_fixtures.py

Writes tests/reference/fits.json, the data-driven corpus read by tests/fit_corpus.rs.
Exact likelihood: the differenced series w has covariance sigma^2 * Omega(theta), Omega the
Toeplitz matrix of ARMA autocovariances (truncated psi-weights, 20000 terms); regression
terms (mean, drift) are profiled out by GLS, sigma^2 = SS/n is concentrated out; the
log-likelihood is -n/2 (log(2 pi sigma^2) + 1) - 1/2 log|Omega|. It is maximised with
scipy.optimize.minimize (Nelder-Mead, then BFGS polish) from several starts; a point
outside the stationary/invertible region gets +inf. CSS: residuals of the recursion on
w - mu with the first p + P*s differenced readings conditioned on and pre-sample
residuals zero; SS minimised over coefficients and mean.
Sign conventions: phi(B) = 1 - sum phi_i B^i, theta(B) = 1 + sum theta_j B^j.
"""
import json
import os

import numpy as np
from scipy.linalg import cho_factor, cho_solve, toeplitz
from scipy.optimize import minimize
from scipy.signal import lfilter

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "..", "data")


def load(name):
    return np.loadtxt(os.path.join(DATA, name), delimiter=",", skiprows=1, usecols=1)


def expand(ns, se, s, sign):
    a = np.r_[1.0, sign * np.asarray(ns, float)]
    b = np.zeros(len(se) * s + 1)
    b[0] = 1.0
    for i, c in enumerate(se):
        b[(i + 1) * s] = sign * c
    return sign * np.convolve(a, b)[1:]


def admissible(ar_coefs):
    if len(ar_coefs) == 0:
        return True
    roots = np.roots(np.r_[1.0, -np.asarray(ar_coefs)])
    return np.all(np.abs(roots) < 1.0 - 1e-9)


def psi(phi, theta, m):
    impulse = np.zeros(m)
    impulse[0] = 1.0
    return lfilter(np.r_[1.0, theta], np.r_[1.0, -np.asarray(phi, float)], impulse)


def acvf(phi, theta, n, m=20000):
    ps = psi(phi, theta, m + n)
    return np.array([np.dot(ps[:m], ps[h:h + m]) for h in range(n)])


def difference(x, d, D, s):
    for _ in range(D):
        x = x[s:] - x[:-s]
    for _ in range(d):
        x = np.diff(x)
    return x


def regressors(n_orig, spec):
    cols = []
    if spec["mean"]:
        cols.append(np.ones(n_orig))
    if spec["drift"]:
        cols.append(np.arange(n_orig, dtype=float))
    return [difference(c, spec["d"], spec["D"], spec["s"]) for c in cols]


def split(params, spec):
    p, q, P, Q = spec["p"], spec["q"], spec["P"], spec["Q"]
    i = 0
    ar = params[i:i + p]; i += p
    ma = params[i:i + q]; i += q
    sar = params[i:i + P]; i += P
    sma = params[i:i + Q]; i += Q
    return ar, ma, sar, sma


def exact_nll(params, w, X, spec):
    ar, ma, sar, sma = split(params, spec)
    if not (admissible(ar) and admissible(sar) and admissible(-np.asarray(ma)) and admissible(-np.asarray(sma))):
        return np.inf, None, None
    phi = expand(ar, sar, spec["s"], -1.0)
    theta = expand(ma, sma, spec["s"], 1.0)
    n = len(w)
    om = toeplitz(acvf(phi, theta, n))
    c = cho_factor(om, lower=True)
    logdet = 2 * np.sum(np.log(np.diag(c[0])))
    beta = []
    r = w
    if X:
        Xm = np.column_stack(X)
        A = Xm.T @ cho_solve(c, Xm)
        b = Xm.T @ cho_solve(c, w)
        beta = np.linalg.solve(A, b)
        r = w - Xm @ beta
    ss = r @ cho_solve(c, r)
    s2 = ss / n
    nll = 0.5 * (n * np.log(2 * np.pi * s2) + n + logdet)
    return nll, list(np.atleast_1d(beta)), s2


def css_ss(params, w, spec):
    ar, ma, sar, sma = split(params[:-1] if spec["mean"] else params, spec)
    mu = params[-1] if spec["mean"] else 0.0
    if not (admissible(ar) and admissible(sar) and admissible(-np.asarray(ma)) and admissible(-np.asarray(sma))):
        return np.inf, 0
    phi = expand(ar, sar, spec["s"], -1.0)
    theta = expand(ma, sma, spec["s"], 1.0)
    z = w - mu
    n = len(z)
    cond = len(phi)
    e = np.zeros(n)
    for t in range(cond, n):
        pred = sum(phi[i] * z[t - i - 1] for i in range(len(phi)))
        pred += sum(theta[j] * e[t - j - 1] for j in range(len(theta)) if t - j - 1 >= 0)
        e[t] = z[t] - pred
    return float(np.sum(e[cond:] ** 2)), n - cond


def fit_exact(w, X, spec, starts):
    best = None
    for x0 in starts:
        f = lambda v: exact_nll(v, w, X, spec)[0]
        r = minimize(f, x0, method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000, "maxfev": 40000})
        r2 = minimize(f, r.x, method="BFGS", options={"gtol": 1e-9})
        x = r2.x if r2.fun <= r.fun else r.x
        fun = min(r.fun, r2.fun)
        if best is None or fun < best[1]:
            best = (x, fun)
    nll, beta, s2 = exact_nll(best[0], w, X, spec)
    return best[0], -nll, beta, s2


def fit_css(w, spec, starts):
    best = None
    for x0 in starts:
        x0 = list(x0) + ([float(np.mean(w))] if spec["mean"] else [])
        f = lambda v: css_ss(v, w, spec)[0] if np.isfinite(css_ss(v, w, spec)[0]) else 1e300
        r = minimize(f, x0, method="Nelder-Mead", options={"xatol": 1e-11, "fatol": 1e-13, "maxiter": 40000, "maxfev": 80000})
        if best is None or r.fun < best[1]:
            best = (r.x, r.fun)
    ss, m = css_ss(best[0], w, spec)
    s2 = ss / m
    ll = -0.5 * m * (np.log(2 * np.pi * s2) + 1)
    return best[0], ll, s2


def labels(spec):
    out = [f"phi.{i}" for i in range(1, spec["p"] + 1)]
    out += [f"theta.{i}" for i in range(1, spec["q"] + 1)]
    out += [f"seasonal_phi.{i}" for i in range(1, spec["P"] + 1)]
    out += [f"seasonal_theta.{i}" for i in range(1, spec["Q"] + 1)]
    return out


def spec_of(p=0, d=0, q=0, P=0, D=0, Q=0, s=1, mean=None, drift=False):
    if mean is None:
        mean = d + D == 0
    return {"p": p, "d": d, "q": q, "P": P, "D": D, "Q": Q, "s": s, "mean": mean, "drift": drift}


def main():
    rng = np.random.default_rng(7)
    huron = load("lake_huron_level_1875_1972.csv")
    lynx = np.log10(load("lynx_trappings_1821_1934.csv"))
    nile = load("nile_flow_1871_1970.csv")
    air = np.log(load("airline_passengers_1949_1960.csv"))
    cases_in = [
        ("lake_huron_ar2", "lake_huron_level_1875_1972.csv", "identity", huron, spec_of(p=2)),
        ("lake_huron_arma11", "lake_huron_level_1875_1972.csv", "identity", huron, spec_of(p=1, q=1)),
        ("log10_lynx_ar2", "lynx_trappings_1821_1934.csv", "log10", lynx, spec_of(p=2)),
        ("nile_arima011", "nile_flow_1871_1970.csv", "identity", nile, spec_of(d=1, q=1)),
        ("nile_arima011_drift", "nile_flow_1871_1970.csv", "identity", nile, spec_of(d=1, q=1, drift=True)),
        ("log_airline_seasonal", "airline_passengers_1949_1960.csv", "ln", air, spec_of(q=1, d=1, Q=1, D=1, s=12)),
    ]
    out = []
    for name, file, transform, x, spec in cases_in:
        w = difference(x, spec["d"], spec["D"], spec["s"])
        X = regressors(len(x), spec)
        k = spec["p"] + spec["q"] + spec["P"] + spec["Q"]
        starts = [np.zeros(k)] + [rng.uniform(-0.5, 0.5, k) for _ in range(3)]
        coefs, ll, beta, s2 = fit_exact(w, X, spec, starts)
        expected = dict(zip(labels(spec), map(float, coefs)))
        reg_labels = (["mean"] if spec["mean"] else []) + (["drift"] if spec["drift"] else [])
        expected.update(dict(zip(reg_labels, map(float, beta))))
        case = {
            "name": name, "data": file, "transform": transform, "spec": spec,
            "source": "dense Gaussian likelihood maximised by scipy (tests/reference/mle_fixtures.py)",
            "exact": {"coefficients": expected, "log_likelihood": float(ll), "innovation_variance": float(s2)},
        }
        if spec["D"] == 0 and spec["d"] == 0:
            cc, cll, cs2 = fit_css(w, spec, [np.zeros(k)])
            cexp = dict(zip(labels(spec) + (["mean"] if spec["mean"] else []), map(float, cc)))
            case["css"] = {"coefficients": cexp, "log_likelihood": float(cll), "innovation_variance": float(cs2)}
        out.append(case)
        print(name, expected, ll)
    with open(os.path.join(HERE, "fits.json"), "w") as f:
        json.dump({"generator": "tests/reference/mle_fixtures.py", "cases": out}, f, indent=1)


if __name__ == "__main__":
    main()
