#!/usr/bin/env python3
"""Jarque-Bera and McLeod-Li reference values on open datasets, computed with numpy/scipy
only, from the published definitions.

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/shape_fixtures.py

Writes tests/reference/shape.json, read by tests/shape_reference.rs.

Jarque & Bera (1980): with m values, sample skewness S = m3 / m2^1.5 and kurtosis
K = m4 / m2^2 (central moments with divisor m), JB = m/6 (S^2 + (K - 3)^2 / 4), p-value
from chi-square(2). Cross-checked against scipy.stats.jarque_bera.
McLeod & Li (1983): the squares a_t = (x_t - mean)^2, their autocorrelations
r(k) = sum_t (a_t - abar)(a_{t+k} - abar) / sum_t (a_t - abar)^2, and
Q = m (m + 2) sum_{k=1}^{H} r(k)^2 / (m - k), p-value from chi-square(H).
"""
import json
import os

import numpy as np
from scipy import stats

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "..", "data")


def load(name):
    return np.loadtxt(os.path.join(DATA, name), delimiter=",", skiprows=1, usecols=1)


def jarque_bera(x):
    m = len(x)
    d = x - x.mean()
    m2, m3, m4 = (d ** 2).mean(), (d ** 3).mean(), (d ** 4).mean()
    s = m3 / m2 ** 1.5
    k = m4 / m2 ** 2
    jb = m / 6.0 * (s ** 2 + (k - 3.0) ** 2 / 4.0)
    ref = stats.jarque_bera(x)
    assert abs(ref.statistic - jb) <= 1e-9 * max(1.0, jb), (ref.statistic, jb)
    return jb, stats.chi2.sf(jb, 2), s, k - 3.0


def mcleod_li(x, h):
    m = len(x)
    a = (x - x.mean()) ** 2
    c = a - a.mean()
    denom = np.sum(c * c)
    r = np.array([np.sum(c[:-k] * c[k:]) / denom for k in range(1, h + 1)])
    q = m * (m + 2) * np.sum(r ** 2 / (m - np.arange(1, h + 1)))
    return q, stats.chi2.sf(q, h)


def main():
    cases = [
        ("nile_flow", "nile_flow_1871_1970.csv", "identity"),
        ("lynx_log10", "lynx_trappings_1821_1934.csv", "log10"),
        ("lake_huron_diff", "lake_huron_level_1875_1972.csv", "diff"),
        ("airline_log_diff", "airline_passengers_1949_1960.csv", "logdiff"),
    ]
    out = []
    for name, file, transform in cases:
        x = load(file)
        if transform == "log10":
            x = np.log10(x)
        elif transform == "diff":
            x = np.diff(x)
        elif transform == "logdiff":
            x = np.diff(np.log(x))
        jb, jp, s, ek = jarque_bera(x)
        case = {"name": name, "data": file, "transform": transform,
                "jarque_bera": {"statistic": jb, "p_value": jp, "skewness": s, "excess_kurtosis": ek},
                "mcleod_li": []}
        for h in (5, 10, 20):
            q, qp = mcleod_li(x, h)
            case["mcleod_li"].append({"lags": h, "statistic": q, "p_value": qp})
        out.append(case)
        print(name, jb, jp, [c["statistic"] for c in case["mcleod_li"]])
    with open(os.path.join(HERE, "shape.json"), "w") as f:
        json.dump({"generator": "tests/reference/shape_fixtures.py", "cases": out}, f, indent=1)


if __name__ == "__main__":
    main()
