"""Timing peer for the Rust ML CFA: fit a correlated-factors CFA with scipy and print seconds.

Reads a covariance JSON ({"cov": [[...]], "n": N, "model": {"groups": [[...], ...]}} as in
tests/reference/sem/cfa60x4.json, or "groups" at top level) or a covariance CSV (no header,
with --n and --groups "0-14,15-29,..."). Model: every latent variance fixed at 1, loadings,
latent correlations and error variances free. Minimises F = ln|Sigma| + tr(S Sigma^-1) - ln|S| - p
by scipy.optimize L-BFGS-B with the analytic gradient (dF/dLambda = 2 W Lambda Phi,
dF/dPhi_kl = 2 (Lambda' W Lambda)_kl, dF/dTheta_ii = W_ii, W = Sigma^-1 (Sigma - S) Sigma^-1),
so the comparison is with a competent dense implementation, not a finite-difference one.
Usage: python3 bench/cfa_reference.py tests/reference/sem/cfa60x4.json [--repeat 3]
"""

import argparse
import json
import time

import numpy as np
from scipy import optimize


def parse_groups(text):
    groups = []
    for part in text.split(","):
        lo, _, hi = part.partition("-")
        groups.append(list(range(int(lo), int(hi or lo) + 1)))
    return groups


def load(args):
    if args.path.endswith(".csv"):
        s = np.loadtxt(args.path, delimiter=",")
        if args.n is None or args.groups is None:
            raise SystemExit("a CSV input needs --n and --groups")
        return s, args.n, parse_groups(args.groups)
    doc = json.load(open(args.path))
    groups = doc.get("groups") or doc["model"]["groups"]
    return np.array(doc["cov"]), int(args.n or doc["n"]), groups


def fit(s, groups):
    p, m = s.shape[0], len(groups)
    mask = np.zeros((p, m), dtype=bool)
    for k, g in enumerate(groups):
        mask[g, k] = True
    low = np.tril_indices(m, -1)
    nl, nc = mask.sum(), len(low[0])
    ln_det_s = np.linalg.slogdet(s)[1]

    def unpack(x):
        lam = np.zeros((p, m))
        lam[mask] = x[:nl]
        phi = np.eye(m)
        phi[low] = x[nl:nl + nc]
        phi.T[low] = x[nl:nl + nc]
        return lam, phi, x[nl + nc:]

    def f_and_g(x):
        lam, phi, th = unpack(x)
        sig = lam @ phi @ lam.T + np.diag(th)
        try:
            c = np.linalg.cholesky(sig)
        except np.linalg.LinAlgError:
            return np.inf, np.zeros_like(x)
        k = np.linalg.inv(sig)
        f = 2 * np.sum(np.log(np.diag(c))) + np.sum(s * k) - ln_det_s - p
        w = k @ (sig - s) @ k
        g_lam = 2 * w @ lam @ phi
        g_phi = 2 * (lam.T @ w @ lam)
        return f, np.concatenate([g_lam[mask], g_phi[low], np.diag(w)])

    sd = np.sqrt(np.diag(s))
    x0 = np.concatenate([0.7 * np.broadcast_to(sd[:, None], (p, m))[mask], np.zeros(nc), np.diag(s) / 2])
    res = optimize.minimize(f_and_g, x0, jac=True, method="L-BFGS-B",
                            options={"gtol": 1e-9, "ftol": 1e-15, "maxiter": 20000})
    return res


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("path")
    ap.add_argument("--n", type=int)
    ap.add_argument("--groups")
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    s, n, groups = load(args)
    times = []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        res = fit(s, groups)
        times.append(time.perf_counter() - t0)
    print(f"F = {res.fun:.10f}  chisq = {(n - 1) * res.fun:.4f}  iterations = {res.nit}  converged = {res.success}")
    print(f"seconds per fit (best of {args.repeat}): {min(times):.4f}")


if __name__ == "__main__":
    main()
