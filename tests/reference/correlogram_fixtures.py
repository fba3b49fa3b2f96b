#!/usr/bin/env python3
"""Reference values for correlograms and portmanteau tests, computed with numpy/scipy only.

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/correlogram_fixtures.py

Writes tests/reference/correlogram.json. The definitions implemented here are written
independently of the crate: ACF with mean correction and divisor m (number of present
readings; missing readings contribute zero to lag products), PACF by solving the
Yule-Walker Toeplitz systems of every order with scipy.linalg.solve_toeplitz (not by
Durbin-Levinson), Ljung-Box and Box-Pierce with scipy.stats.chi2.sf.
"""
import json
import os

import numpy as np
from scipy.linalg import solve_toeplitz
from scipy.stats import chi2

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "..", "data")


def load(name):
    vals = np.loadtxt(os.path.join(DATA, name), delimiter=",", skiprows=1, usecols=1)
    return vals


def acf(x, max_lag):
    present = ~np.isnan(x)
    m = present.sum()
    mean = x[present].mean()
    z = np.where(present, x - mean, 0.0)
    n = len(x)
    c = np.array([np.dot(z[: n - h], z[h:]) for h in range(max_lag + 1)]) / m
    return c, c / c[0], int(m)


def pacf(r, max_lag):
    out = []
    for k in range(1, max_lag + 1):
        phi = solve_toeplitz(r[:k], r[1 : k + 1])
        out.append(phi[-1])
    return np.array(out)


def portmanteau(r, m, max_lag, fitted):
    rows = []
    for h in range(1, max_lag + 1):
        rk = r[1 : h + 1]
        k = np.arange(1, h + 1)
        lb = m * (m + 2) * np.sum(rk**2 / (m - k))
        bp = m * np.sum(rk**2)
        df = h - fitted
        rows.append(
            {
                "lag": h,
                "ljung_box": lb,
                "box_pierce": bp,
                "df": df if df > 0 else None,
                "ljung_box_p": float(chi2.sf(lb, df)) if df > 0 else None,
                "box_pierce_p": float(chi2.sf(bp, df)) if df > 0 else None,
            }
        )
    return rows


def case(name, x, max_lag, fitted, source):
    c, r, m = acf(x, max_lag)
    return {
        "name": name,
        "source": source,
        "series": [None if np.isnan(v) else float(v) for v in x],
        "max_lag": max_lag,
        "fitted_coefficients": fitted,
        "mean": float(np.nanmean(x)),
        "autocovariance": c.tolist(),
        "autocorrelation": r.tolist(),
        "partial": pacf(r, max_lag).tolist(),
        "portmanteau": portmanteau(r, m, max_lag, fitted),
    }


def main():
    cases = []
    huron = load("lake_huron_level_1875_1972.csv")
    cases.append(case("lake_huron", huron, 20, 0, "Lake Huron levels (tests/data), numpy/scipy"))
    lynx = np.log10(load("lynx_trappings_1821_1934.csv"))
    cases.append(case("log10_lynx", lynx, 30, 2, "log10 lynx trappings (tests/data), numpy/scipy"))
    nile = load("nile_flow_1871_1970.csv")
    cases.append(case("nile_diff", np.diff(nile), 15, 1, "differenced Nile flow (tests/data), numpy/scipy"))
    air = np.log(load("airline_passengers_1949_1960.csv"))
    dd = air[13:] - air[12:-1] - air[1:-12] + air[:-13]
    cases.append(case("airline_log_dd", dd, 36, 2, "log airline passengers, (1-B)(1-B^12), numpy/scipy"))
    gappy = huron.copy()
    gappy[[0, 5, 6, 7, 40, 41, 97]] = np.nan
    cases.append(case("lake_huron_gaps", gappy, 12, 0, "Lake Huron with 7 readings blanked, numpy/scipy"))
    with open(os.path.join(HERE, "correlogram.json"), "w") as f:
        json.dump({"generator": "tests/reference/correlogram_fixtures.py", "cases": cases}, f, indent=1)


if __name__ == "__main__":
    main()
