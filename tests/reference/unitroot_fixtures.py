#!/usr/bin/env python3
"""KPSS and augmented Dickey-Fuller statistics by plain numpy regressions.

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/unitroot_fixtures.py

Writes tests/reference/unitroot.json. Definitions (written from the papers, not from the
crate): KPSS (Kwiatkowski et al. 1992) eta = n^-2 sum S_t^2 / s^2(l), residuals from OLS on
a constant (level) or constant + trend, Bartlett window l = floor(4 (n/100)^(1/4)).
ADF: OLS of dy_t on [1, (t), y_{t-1}, dy_{t-1..t-k}], t-ratio of the y_{t-1} coefficient;
k chosen by the information measure m ln(SSR/m) + 2 (regressors) over k = 0..floor(12 (n/100)^(1/4)) on the
common sample starting at kmax, then the chosen k refitted on its own full sample.
"""
import json
import os

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "..", "data")


def load(name):
    return np.loadtxt(os.path.join(DATA, name), delimiter=",", skiprows=1, usecols=1)


def kpss(y, trend):
    n = len(y)
    X = np.column_stack([np.ones(n), np.arange(n)]) if trend else np.ones((n, 1))
    b, *_ = np.linalg.lstsq(X, y, rcond=None)
    e = y - X @ b
    l = int(np.floor(4 * (n / 100) ** 0.25))
    s2 = e @ e / n
    for j in range(1, l + 1):
        s2 += 2 * (1 - j / (l + 1)) * (e[j:] @ e[:-j]) / n
    S = np.cumsum(e)
    return float(S @ S / (n * n * s2)), l


def adf(y, trend):
    n = len(y)
    dy = np.diff(y)
    kmax = min(int(np.floor(12 * (n / 100) ** 0.25)), n // 4)

    def design(k, start):
        rows = np.arange(start, len(dy))
        cols = [np.ones(len(rows))]
        if trend:
            cols.append(rows.astype(float))
        cols.append(y[rows])
        for j in range(1, k + 1):
            cols.append(dy[rows - j])
        return np.column_stack(cols), dy[rows]

    best = None
    for k in range(kmax + 1):
        X, t = design(k, kmax)
        b, *_ = np.linalg.lstsq(X, t, rcond=None)
        r = t - X @ b
        m = len(t)
        info = m * np.log(r @ r / m) + 2 * X.shape[1]
        if best is None or info < best[0]:
            best = (info, k)
    k = best[1]
    X, t = design(k, k)
    b, *_ = np.linalg.lstsq(X, t, rcond=None)
    r = t - X @ b
    s2 = r @ r / (len(t) - X.shape[1])
    cov = s2 * np.linalg.inv(X.T @ X)
    g = 2 if trend else 1
    return float(b[g] / np.sqrt(cov[g, g])), k, len(t)


def main():
    series = {
        "nile": load("nile_flow_1871_1970.csv"),
        "lake_huron": load("lake_huron_level_1875_1972.csv"),
        "log_airline": np.log(load("airline_passengers_1949_1960.csv")),
        "log10_lynx": np.log10(load("lynx_trappings_1821_1934.csv")),
    }
    files = {"nile": "nile_flow_1871_1970.csv", "lake_huron": "lake_huron_level_1875_1972.csv",
             "log_airline": "airline_passengers_1949_1960.csv", "log10_lynx": "lynx_trappings_1821_1934.csv"}
    transforms = {"nile": "identity", "lake_huron": "identity", "log_airline": "ln", "log10_lynx": "log10"}
    out = []
    for name, y in series.items():
        for trend in (False, True):
            ks, kl = kpss(y, trend)
            a, ak, am = adf(y, trend)
            out.append({"name": name, "data": files[name], "transform": transforms[name], "trend": trend,
                        "kpss": ks, "kpss_lags": kl, "adf": a, "adf_lags": ak, "adf_obs": am})
    with open(os.path.join(HERE, "unitroot.json"), "w") as f:
        json.dump({"generator": "tests/reference/unitroot_fixtures.py", "cases": out}, f, indent=1)


if __name__ == "__main__":
    main()
