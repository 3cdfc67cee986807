"""Reference values for crates/construe-stats/src/tetrad.rs and crates/construe-stats/src/fdr.rs.

Run: python3 tests/reference/tetrad/make_tetrad.py  (writes tetrad.json beside this script).
Everything here is computed with numpy/scipy, independently of the Rust code:
  * wishart_mc: Monte Carlo variance of the three tetrad differences of the unbiased sample
    covariance (divisor N - 1) of N multivariate-normal rows, under a one-factor population
    (all tetrads vanish), with its Monte Carlo standard error;
  * delta: tetrads of a skewed data set and their distribution-free (Bollen & Ting 1993) and
    normal-theory delta-method standard errors, built from the full covariance matrix of the
    vech of the sample covariance (fourth-order moments about the mean, divisor N);
  * bh: Benjamini-Hochberg adjusted p-values from scipy.stats.false_discovery_control.
Tetrad labelling (items i, j, k, l): t1 = s_ij s_kl - s_ik s_jl, t2 = s_ij s_kl - s_il s_jk,
t3 = s_ik s_jl - s_il s_jk.
"""
import json
import os
import platform

import numpy as np
import scipy
from scipy import stats


def tetrads(s, i, j, k, l):
    return np.array([
        s[..., i, j] * s[..., k, l] - s[..., i, k] * s[..., j, l],
        s[..., i, j] * s[..., k, l] - s[..., i, l] * s[..., j, k],
        s[..., i, k] * s[..., j, l] - s[..., i, l] * s[..., j, k],
    ])


def one_factor(loadings, sds):
    lam = np.asarray(loadings, float)
    s = np.outer(lam, lam)
    np.fill_diagonal(s, 1.0)
    sd = np.asarray(sds, float)
    return s * np.outer(sd, sd)


def wishart_mc(rng, sigma, n_obs, replicates, chunk=25000):
    chol = np.linalg.cholesky(sigma)
    sums = np.zeros(3)
    sq = np.zeros(3)
    per_chunk = []
    done = 0
    while done < replicates:
        r = min(chunk, replicates - done)
        x = rng.standard_normal((r, n_obs, 4)) @ chol.T
        xc = x - x.mean(axis=1, keepdims=True)
        c = np.einsum("rna,rnb->rab", xc, xc) / (n_obs - 1)
        t = tetrads(c, 0, 1, 2, 3)
        per_chunk.append((t ** 2).mean(axis=1))
        sums += t.sum(axis=1)
        sq += (t ** 2).sum(axis=1)
        done += r
    # Population tetrads vanish, so E t = 0 and var t = E t^2; the MC standard error of the
    # mean of t^2 is estimated from the spread of the chunk means.
    per_chunk = np.array(per_chunk)
    var = sq / replicates
    se = per_chunk.std(axis=0, ddof=1) / np.sqrt(len(per_chunk))
    return var, se, sums / replicates


def vech_pairs(p):
    return [(a, b) for a in range(p) for b in range(a, p)]


def delta_case(rng):
    n = 300
    # Skewed one-factor data: factor and errors are centred chi-square(3) draws.
    f = (rng.chisquare(3, n) - 3) / np.sqrt(6)
    lam = np.array([0.8, 0.7, 0.6, 0.5])
    e = (rng.chisquare(3, (n, 4)) - 3) / np.sqrt(6)
    x = f[:, None] * lam[None, :] + e * np.sqrt(1 - lam ** 2)[None, :]
    x = x * np.array([1.0, 2.0, 0.5, 1.5])[None, :] + np.array([3.0, -1.0, 0.0, 10.0])[None, :]
    s = np.cov(x, rowvar=False, ddof=1)
    t = tetrads(s, 0, 1, 2, 3)
    pairs = vech_pairs(4)
    idx = {pq: u for u, pq in enumerate(pairs)}
    xc = x - x.mean(axis=0)
    m2 = xc.T @ xc / n
    gamma_df = np.zeros((len(pairs), len(pairs)))
    gamma_nt = np.zeros((len(pairs), len(pairs)))
    for u, (a, b) in enumerate(pairs):
        for v, (c, d) in enumerate(pairs):
            m4 = np.mean(xc[:, a] * xc[:, b] * xc[:, c] * xc[:, d])
            gamma_df[u, v] = m4 - m2[a, b] * m2[c, d]
            gamma_nt[u, v] = s[a, c] * s[b, d] + s[a, d] * s[b, c]

    def grad(which):
        g = np.zeros(len(pairs))
        i, j, k, l = 0, 1, 2, 3
        terms = {
            0: [((i, j), (k, l), 1), ((i, k), (j, l), -1)],
            1: [((i, j), (k, l), 1), ((i, l), (j, k), -1)],
            2: [((i, k), (j, l), 1), ((i, l), (j, k), -1)],
        }[which]
        for p1, p2, sign in terms:
            g[idx[p1]] += sign * s[p2]
            g[idx[p2]] += sign * s[p1]
        return g

    G = np.array([grad(w) for w in range(3)])
    cov_df = G @ gamma_df @ G.T / n
    cov_nt = G @ gamma_nt @ G.T / (n - 1)
    out = {
        "data": x.tolist(),
        "covariance": s.tolist(),
        "tetrads": t.tolist(),
        "delta_se": np.sqrt(np.diag(cov_df)).tolist(),
        "delta_p": (2 * stats.norm.sf(np.abs(t / np.sqrt(np.diag(cov_df))))).tolist(),
        "normal_se": np.sqrt(np.diag(cov_nt)).tolist(),
    }
    sub = [0, 1]
    for name, cov in (("delta", cov_df), ("normal", cov_nt)):
        c = cov[np.ix_(sub, sub)]
        chi = float(t[sub] @ np.linalg.solve(c, t[sub]))
        out[f"joint12_{name}_stat"] = chi
        out[f"joint12_{name}_p"] = float(stats.chi2.sf(chi, 2))
    return out


def main():
    rng = np.random.default_rng(20240601)
    cases = []
    for loadings, sds in (([0.8, 0.7, 0.6, 0.5], [1.0, 2.0, 0.5, 1.5]),
                          ([0.4, 0.4, 0.4, 0.4], [1.0, 1.0, 1.0, 1.0])):
        sigma = one_factor(loadings, sds)
        for n_obs in (8, 15, 50):
            var, se, mean = wishart_mc(rng, sigma, n_obs, 400000)
            cases.append({
                "sigma": sigma.tolist(), "n_obs": n_obs, "replicates": 400000,
                "var": var.tolist(), "var_mc_se": se.tolist(), "mean": mean.tolist(),
            })
    p = np.concatenate([rng.uniform(0, 1, 30), rng.uniform(0, 0.01, 10), [0.5, 0.5, 1e-12, 0.0, 1.0]])
    p = rng.permutation(p)
    bh = {"p": p.tolist(), "adjusted": stats.false_discovery_control(p, method="bh").tolist()}
    out = {
        "generator": "tests/reference/tetrad/make_tetrad.py",
        "versions": {"python": platform.python_version(), "numpy": np.__version__,
                     "scipy": scipy.__version__},
        "seed": 20240601,
        "wishart_mc": cases,
        "delta": delta_case(rng),
        "bh": bh,
    }
    here = os.path.dirname(os.path.abspath(__file__))
    with open(os.path.join(here, "tetrad.json"), "w") as fh:
        json.dump(out, fh, indent=1)


if __name__ == "__main__":
    main()
