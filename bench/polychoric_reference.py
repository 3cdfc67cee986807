#!/usr/bin/env python3
"""Independent two-step polychoric reference (numpy/scipy) for timing and checking construe.

Thresholds from the margins with scipy.stats.norm.ppf; rho per pair by
scipy.optimize.minimize_scalar (bounded, |rho| <= 0.9999) on the table log-likelihood. The
bivariate normal CDF here is Owen's (1956) T-function identity evaluated with
scipy.special.owens_t, vectorised over the threshold grid, so it shares no code or algorithm
with the Rust implementation (Genz 2004); a few points are checked against
scipy.stats.multivariate_normal.cdf at start-up.

Usage:
    python3 bench/polychoric_reference.py --make-csv items.csv [--items 100 --n 10000 --seed 11]
    python3 bench/polychoric_reference.py items.csv --out reference.json [--compare other.json]

The CSV has a header of item names and integer codes (0-based or not; each item's distinct
values are its ordered categories; empty cells are missing, pairs use complete rows).
`--compare` reads a JSON object with a "matrix" key (list of rows) and prints the largest
absolute difference.
"""

import argparse
import json
import platform
import time

import numpy as np
import scipy
from scipy.optimize import minimize_scalar
from scipy.special import owens_t
from scipy.stats import multivariate_normal, norm

MAX_CORRELATION = 0.9999


def bvn_cdf(h, k, rho):
    """P(X <= h, Y <= k) for finite arrays h, k (Owen 1956, eq. 3.1 ff.)."""
    h = np.where(h == 0.0, 1e-12, h)
    k = np.where(k == 0.0, 1e-12, k)
    s = np.sqrt(1.0 - rho * rho)
    a_h = (k - rho * h) / (h * s)
    a_k = (h - rho * k) / (k * s)
    delta = np.where(h * k > 0.0, 0.0, 0.5)
    return 0.5 * norm.cdf(h) + 0.5 * norm.cdf(k) - owens_t(h, a_h) - owens_t(k, a_k) - delta


def self_check():
    pts = [(-1.0, 0.5, 0.3), (0.2, 1.4, -0.7), (1.1, -0.4, 0.95), (-2.0, -1.5, 0.6)]
    worst = 0.0
    for h, k, r in pts:
        ref = multivariate_normal(mean=[0.0, 0.0], cov=[[1.0, r], [r, 1.0]]).cdf([h, k])
        worst = max(worst, abs(float(bvn_cdf(np.array(h), np.array(k), r)) - ref))
    return worst


def cdf_grid(a, b, rho):
    """Phi_2 at all corners of thresholds a (rows) and b (cols), padded with -inf/+inf."""
    r, c = len(a) + 1, len(b) + 1
    grid = np.zeros((r + 1, c + 1))
    hh, kk = np.meshgrid(a, b, indexing="ij")
    grid[1:r, 1:c] = bvn_cdf(hh, kk, rho)
    grid[r, 1:c] = norm.cdf(b)
    grid[1:r, c] = norm.cdf(a)
    grid[r, c] = 1.0
    return grid


def polychoric_pair(x, y):
    ok = (x >= 0) & (y >= 0)
    x, y = x[ok], y[ok]
    lx, ly = x.max() + 1, y.max() + 1
    tab = np.bincount(x * ly + y, minlength=lx * ly).reshape(lx, ly).astype(float)
    tab = tab[tab.sum(axis=1) > 0][:, tab.sum(axis=0) > 0]
    n = tab.sum()
    a = norm.ppf(np.cumsum(tab.sum(axis=1))[:-1] / n)
    b = norm.ppf(np.cumsum(tab.sum(axis=0))[:-1] / n)
    populated = tab > 0

    def negll(rho):
        g = cdf_grid(a, b, rho)
        p = g[1:, 1:] - g[:-1, 1:] - g[1:, :-1] + g[:-1, :-1]
        p = np.maximum(p[populated], 1e-300)
        return -np.sum(tab[populated] * np.log(p))

    res = minimize_scalar(negll, bounds=(-MAX_CORRELATION, MAX_CORRELATION), method="bounded",
                          options={"xatol": 1e-10})
    return float(res.x)


def read_items(path):
    with open(path) as fh:
        names = fh.readline().strip().split(",")
    raw = np.genfromtxt(path, delimiter=",", skip_header=1, filling_values=np.nan)
    cols = []
    for j in range(raw.shape[1]):
        v = raw[:, j]
        codes = np.full(v.shape, -1, dtype=np.int64)
        present = ~np.isnan(v)
        _, inv = np.unique(v[present], return_inverse=True)
        codes[present] = inv
        cols.append(codes)
    return names, cols


def make_csv(path, items, n, seed):
    """One-factor data cut into five categories (loadings 0.5..0.9, cuts -1.5 -0.5 0.4 1.3)."""
    rng = np.random.default_rng(seed)
    loadings = 0.5 + 0.4 * (np.arange(items) % 5) / 4.0
    f = rng.standard_normal(n)
    e = rng.standard_normal((n, items))
    v = f[:, None] * loadings + e * np.sqrt(1.0 - loadings ** 2)
    codes = np.searchsorted(np.array([-1.5, -0.5, 0.4, 1.3]), v)
    header = ",".join(f"item{j + 1}" for j in range(items))
    np.savetxt(path, codes, fmt="%d", delimiter=",", header=header, comments="")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("csv", nargs="?")
    ap.add_argument("--out", default="polychoric_reference.json")
    ap.add_argument("--compare")
    ap.add_argument("--make-csv")
    ap.add_argument("--items", type=int, default=100)
    ap.add_argument("--n", type=int, default=10000)
    ap.add_argument("--seed", type=int, default=11)
    args = ap.parse_args()
    if args.make_csv:
        make_csv(args.make_csv, args.items, args.n, args.seed)
        print(f"wrote {args.make_csv}: {args.n} rows x {args.items} items")
        return
    if not args.csv:
        ap.error("a CSV of integer items is required")
    print(f"owens_t bvn vs scipy multivariate_normal.cdf: max abs diff {self_check():.2e}")
    names, cols = read_items(args.csv)
    p = len(cols)
    start = time.perf_counter()
    m = np.eye(p)
    for i in range(p):
        for j in range(i + 1, p):
            m[i, j] = m[j, i] = polychoric_pair(cols[i], cols[j])
    seconds = time.perf_counter() - start
    print(f"{p} items, {p * (p - 1) // 2} pairs: {seconds:.2f} s (single-threaded python)")
    with open(args.out, "w") as fh:
        json.dump({"items": names, "matrix": m.tolist(), "seconds": seconds,
                   "method": "two-step polychoric, minimize_scalar bounded, owens_t bvn",
                   "versions": {"python": platform.python_version(), "numpy": np.__version__,
                                "scipy": scipy.__version__}}, fh)
    if args.compare:
        with open(args.compare) as fh:
            other = np.array(json.load(fh)["matrix"])
        print(f"max abs difference vs {args.compare}: {np.abs(other - m).max():.2e}")


if __name__ == "__main__":
    main()
