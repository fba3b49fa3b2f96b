#!/usr/bin/env python3
"""Average run lengths of the tabular CUSUM on N(mu, 1) values (numpy/scipy only): the
reference for lagwise's cusum_run_length / cusum_threshold and the monitor's shift test.

Regenerate (from the repository root):
    pip install numpy scipy
    python3 tests/reference/cusum_fixtures.py

Writes tests/reference/cusum.json with
- "one_sided": the upper chart S_t = max(0, S_{t-1} + x_t - k), signal when S_t > h, from
  S_0 = 0. Method independent of the library's Markov chain: the integral equation
      L(x) = 1 + L(0) F(k - x - mu) + int_0^h L(y) f(y + k - x - mu) dy
  (Page 1954) solved by the Nystrom method on 128 Gauss-Legendre points.
- "two_sided_simulated": the two-sided scheme (upper and lower charts together, signal
  when either exceeds h) simulated directly, 20,000 runs each with a fixed seed; mean run
  length and its standard error. Checks the 1/L = 1/L+ + 1/L- combination.
- "thresholds": h for a wanted two-sided in-control run length (brentq on the integral
  equation values).
"""
import json
import os

import numpy as np
from scipy.optimize import brentq
from scipy.stats import norm


def one_sided(k, h, mu, points=128):
    z, wt = np.polynomial.legendre.leggauss(points)
    y = (z + 1.0) * h / 2.0
    wy = wt * h / 2.0
    pts = np.concatenate([[0.0], y])
    a = np.eye(points + 1)
    for r, x in enumerate(pts):
        a[r, 0] -= norm.cdf(k - x - mu)
        a[r, 1:] -= wy * norm.pdf(y + k - x - mu)
    return float(np.linalg.solve(a, np.ones(points + 1))[0])


def two_sided(k, h, mu):
    return 1.0 / (1.0 / one_sided(k, h, mu) + 1.0 / one_sided(k, h, -mu))


def simulate(k, h, mu, runs, seed):
    rng = np.random.default_rng(seed)
    hi = np.zeros(runs)
    lo = np.zeros(runs)
    length = np.zeros(runs, dtype=np.int64)
    alive = np.ones(runs, dtype=bool)
    t = 0
    while alive.any():
        t += 1
        idx = np.flatnonzero(alive)
        x = rng.standard_normal(idx.size) + mu
        hi[idx] = np.maximum(0.0, hi[idx] + x - k)
        lo[idx] = np.maximum(0.0, lo[idx] - x - k)
        done = idx[(hi[idx] > h) | (lo[idx] > h)]
        length[done] = t
        alive[done] = False
    return float(length.mean()), float(length.std(ddof=1) / np.sqrt(runs))


def main():
    one = []
    for k in (0.25, 0.5, 1.0):
        for h in (2.0, 4.0, 5.0, 8.0):
            for mu in (-2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0):
                one.append({"k": k, "h": h, "mu": mu, "run_length": one_sided(k, h, mu)})
    sims = []
    for seed, (k, h, mu) in enumerate([(0.5, 4.0, 0.0), (0.5, 5.0, 0.0), (0.5, 5.0, 1.0),
                                        (0.25, 4.0, 0.0), (1.0, 2.0, 0.0), (0.5, 4.0, 0.5)]):
        mean, se = simulate(k, h, mu, 20_000, 1000 + seed)
        sims.append({"k": k, "h": h, "mu": mu, "mean": mean, "se": se})
    thresholds = []
    for k, target in ((0.5, 465.44), (0.5, 10_000.0), (0.25, 2_000.0), (1.0, 100_000.0)):
        h = brentq(lambda h: np.log(two_sided(k, h, 0.0)) - np.log(target), 0.1, 15.0,
                   xtol=1e-12)
        thresholds.append({"k": k, "run_length": target, "h": h})
    out = {"one_sided": one, "two_sided_simulated": sims, "thresholds": thresholds}
    path = os.path.join(os.path.dirname(__file__), "cusum.json")
    with open(path, "w") as f:
        json.dump(out, f, indent=1)
    print("wrote", path)


if __name__ == "__main__":
    main()
