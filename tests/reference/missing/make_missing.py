"""Reference values for crates/construe-stats/src/missing.rs.

Run: python3 tests/reference/missing/make_missing.py  (writes missing.json beside this script).
Everything here is computed with numpy/scipy, independently of the Rust code:
  * data: 4 normal items, n = 240, item 2 and 3 missing at random (more often when item 0 is
    high), with seed 20261205; NaN marks a missing value (written as null);
  * mle: the maximum-likelihood mean and covariance under MAR found by direct maximization of
    the observed-data log-likelihood (scipy.optimize.minimize, BFGS, Cholesky parametrization),
    not by EM; and the log-likelihood there;
  * em: a straightforward numpy EM (row by row E step, Little & Rubin 2002 section 11.2.1) run
    to a change below 1e-14, for the 1e-8 comparison of issue 17;
  * little: Little's (1988) MCAR statistic d2 = sum_j n_j (ybar_j - mu_j)' S_j^-1 (ybar_j - mu_j)
    with the ML estimates, df = sum_j p_j - p, p-value from scipy.stats.chi2;
  * information: the observed information -d2 l / dtheta dtheta' of theta = (mu, vech(Sigma))
    (upper triangle, row-major) by central finite differences of the log-likelihood;
  * sandwich: H^-1 B H^-1 with B = sum_i g_i g_i', g_i the casewise scores by central finite
    differences of each row's log-likelihood.
"""
import json
import os
import platform

import numpy as np
import scipy
from scipy import optimize, stats

P = 4
N = 240
rng = np.random.default_rng(20261205)
sigma = np.array([[1.0, 0.5, 0.4, 0.3], [0.5, 1.2, 0.45, 0.35], [0.4, 0.45, 0.9, 0.3], [0.3, 0.35, 0.3, 1.1]])
mu = np.array([0.5, -0.2, 1.0, 0.0])
y = rng.multivariate_normal(mu, sigma, size=N)
for i in range(N):
    hi = y[i, 0] > 0.5
    if rng.random() < (0.45 if hi else 0.1):
        y[i, 2] = np.nan
    if rng.random() < (0.35 if hi else 0.05):
        y[i, 3] = np.nan
    if rng.random() < 0.04:
        y[i, 1] = np.nan
ELEMS = [(j, l) for j in range(P) for l in range(j, P)]


def unpack(theta):
    m = theta[:P]
    s = np.zeros((P, P))
    for k, (j, l) in enumerate(ELEMS):
        s[j, l] = s[l, j] = theta[P + k]
    return m, s


def row_loglik(theta, row):
    m, s = unpack(theta)
    o = ~np.isnan(row)
    e = row[o] - m[o]
    so = s[np.ix_(o, o)]
    sign, logdet = np.linalg.slogdet(so)
    return -0.5 * (o.sum() * np.log(2 * np.pi) + logdet + e @ np.linalg.solve(so, e))


def loglik(theta):
    return sum(row_loglik(theta, r) for r in y)


def chol_to_theta(x):
    m = x[:P]
    L = np.zeros((P, P))
    L[np.tril_indices(P)] = x[P:]
    s = L @ L.T
    return np.concatenate([m, [s[j, l] for (j, l) in ELEMS]])


start = np.concatenate([np.nanmean(y, axis=0), np.linalg.cholesky(np.diag(np.nanvar(y, axis=0)))[np.tril_indices(P)]])
res = optimize.minimize(lambda x: -loglik(chol_to_theta(x)), start, method="BFGS", options={"gtol": 1e-9, "maxiter": 10000})
theta = chol_to_theta(res.x)
m_hat, s_hat = unpack(theta)

# Observed information and casewise scores by central differences.
q = len(theta)
h = 1e-4


def grad_row(t, row):
    g = np.zeros(q)
    for a in range(q):
        tp = t.copy(); tp[a] += h
        tm = t.copy(); tm[a] -= h
        g[a] = (row_loglik(tp, row) - row_loglik(tm, row)) / (2 * h)
    return g


def information(t):
    info = np.zeros((q, q))
    for a in range(q):
        tp = t.copy(); tp[a] += h
        tm = t.copy(); tm[a] -= h
        gp = sum(grad_row(tp, r) for r in y)
        gm = sum(grad_row(tm, r) for r in y)
        info[:, a] = -(gp - gm) / (2 * h)
    return (info + info.T) / 2



def numpy_em(data, tol=1e-14, max_iter=100000):
    n, p = data.shape
    m = np.nanmean(data, axis=0)
    s = np.diag(np.nanvar(data, axis=0))
    for it in range(max_iter):
        t1 = np.zeros(p)
        t2 = np.zeros((p, p))
        for row in data:
            o = ~np.isnan(row)
            mis = ~o
            yhat = row.copy()
            c = np.zeros((p, p))
            if mis.any():
                beta = s[np.ix_(mis, o)] @ np.linalg.inv(s[np.ix_(o, o)])
                yhat[mis] = m[mis] + beta @ (row[o] - m[o])
                c[np.ix_(mis, mis)] = s[np.ix_(mis, mis)] - beta @ s[np.ix_(o, mis)]
            t1 += yhat
            t2 += np.outer(yhat, yhat) + c
        m_new = t1 / n
        s_new = t2 / n - np.outer(m_new, m_new)
        change = max(np.abs(m_new - m).max(), np.abs(s_new - s).max())
        m, s = m_new, s_new
        if change < tol:
            return m, s, it + 1
    raise RuntimeError("EM did not converge")


em_mean, em_cov, em_iterations = numpy_em(y)

# Polish the optimum with Newton steps on theta itself (BFGS stops on precision loss).
for _ in range(3):
    grad = sum(grad_row(theta, r) for r in y)
    theta = theta + np.linalg.solve(information(theta), grad)
grad_norm = float(np.abs(sum(grad_row(theta, r) for r in y)).max())
m_hat, s_hat = unpack(theta)
scores = np.array([grad_row(theta, r) for r in y])
info = information(theta)
# Little's test.
patterns = {}
for r in y:
    key = tuple(~np.isnan(r))
    patterns.setdefault(key, []).append(r)
d2 = 0.0
df = 0
for key, rows in patterns.items():
    o = np.array(key)
    rows = np.array(rows)
    dev = rows[:, o].mean(axis=0) - m_hat[o]
    d2 += len(rows) * dev @ np.linalg.solve(s_hat[np.ix_(o, o)], dev)
    df += o.sum()
df -= P
p_value = stats.chi2.sf(d2, df)

hinv = np.linalg.inv(info)
sandwich = hinv @ (scores.T @ scores) @ hinv

out = {
    "generator": "tests/reference/missing/make_missing.py",
    "versions": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__},
    "columns": [[None if np.isnan(v) else float(v) for v in y[:, j]] for j in range(P)],
    "mean": m_hat.tolist(),
    "cov": s_hat.tolist(),
    "em": {"mean": em_mean.tolist(), "cov": em_cov.tolist(), "iterations": em_iterations},
    "loglik": float(loglik(theta)),
    "max_abs_gradient": grad_norm,
    "little": {"stat": float(d2), "df": int(df), "p": float(p_value), "patterns": len(patterns)},
    "information": info.tolist(),
    "sandwich": sandwich.tolist(),
}
with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "missing.json"), "w") as f:
    json.dump(out, f, indent=1)
print("wrote missing.json; optimizer:", res.message, "loglik", out["loglik"], "little", out["little"])
