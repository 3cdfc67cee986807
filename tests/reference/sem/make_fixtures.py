"""Independent ML SEM reference fits with numpy + scipy, for the Rust engine's tests.

Each case: data simulated once by numpy (fixed seed) from a known population model, the
sample covariance (divisor n - 1) stored, then the ML discrepancy
F = ln|Sigma| + tr(S Sigma^-1) - ln|S| - p minimised by scipy.optimize (BFGS, L-BFGS-B for the
large case) with the gradient tr(W dSigma/dtheta), W = Sigma^-1 (Sigma - S) Sigma^-1, where
dSigma/dtheta comes from complex-step differentiation of Sigma(theta) (exact to rounding).
SEs: inverse of the expected information (n-1)/2 J' (Sigma^-1 kron Sigma^-1) J with
J = dvec(Sigma)/dtheta (explicit Kronecker product). Chi-square, p, RMSEA with its 90% CI
(scipy.stats.ncx2 + brentq), CFI, TLI, SRMR against the independence baseline.
Run: python3 make_fixtures.py   (writes sem.json, cfa60x4.json, reliability.json here)
"""

import json
import platform
import time
from pathlib import Path

import numpy as np
import scipy
from scipy import optimize, stats

HERE = Path(__file__).resolve().parent


# ---------------------------------------------------------------- model description -> entries
def build(desc):
    """Entries of Lambda, B, Psi, Theta: None = fixed 0, float = fixed, str = free label."""
    p, groups = desc["p"], desc["groups"]
    m = len(groups)
    unit = desc["identification"] == "unit_latent_variance"
    lam = [[None] * m for _ in range(p)]
    beta = [[None] * m for _ in range(m)]
    psi = [[None] * m for _ in range(m)]
    theta = [[None] * p for _ in range(p)]
    for k, g in enumerate(groups):
        for pos, i in enumerate(g):
            lam[i][k] = 1.0 if (not unit and pos == 0) else f"lam{i}_{k}"
        psi[k][k] = 1.0 if unit else f"psi{k}_{k}"
    endo = set()
    for frm, to in desc.get("paths", []):
        beta[to][frm] = f"b{to}_{frm}"
        endo.add(to)
    for k in range(m):
        for l in range(k):
            if k not in endo and l not in endo:
                psi[k][l] = psi[l][k] = f"psi{k}_{l}"
    for i in range(p):
        theta[i][i] = f"th{i}_{i}"
    for i, v in desc.get("fixed_error_variances", {}).items():
        theta[int(i)][int(i)] = float(v)
    for i, j in desc.get("error_covariances", []):
        theta[i][j] = theta[j][i] = f"th{max(i, j)}_{min(i, j)}"
    for label, cells in desc.get("equal_loadings", {}).items():
        for i, k in cells:
            lam[i][k] = label
    return {"lambda": lam, "beta": beta, "psi": psi, "theta": theta}


def free_labels(ent):
    labels = []
    for name in ("lambda", "beta", "psi", "theta"):
        for row in ent[name]:
            for x in row:
                if isinstance(x, str) and x not in labels:
                    labels.append(x)
    return labels


def fill(entries, labels, th):
    idx = {l: t for t, l in enumerate(labels)}
    out = np.zeros((len(entries), len(entries[0])), dtype=th.dtype)
    for r, row in enumerate(entries):
        for c, x in enumerate(row):
            if isinstance(x, str):
                out[r, c] = th[idx[x]]
            elif x is not None:
                out[r, c] = x
    return out


def latent_cov(ent, labels, th):
    b, psi = fill(ent["beta"], labels, th), fill(ent["psi"], labels, th)
    a = np.linalg.inv(np.eye(b.shape[0]) - b)
    return a @ psi @ a.T


def sigma(ent, labels, th):
    lam, theta = fill(ent["lambda"], labels, th), fill(ent["theta"], labels, th)
    return lam @ latent_cov(ent, labels, th) @ lam.T + theta


def complex_step(fun, th, h=1e-30):
    """d fun / d theta by complex steps: Im(fun(theta + i h e_t)) / h, exact to rounding."""
    cols = []
    for t in range(len(th)):
        z = th.astype(complex)
        z[t] += 1j * h
        cols.append(np.imag(fun(z)).ravel() / h)
    return np.array(cols).T


def discrepancy(s, sig):
    try:
        chol = np.linalg.cholesky(sig)  # Sigma must be positive definite
    except np.linalg.LinAlgError:
        return np.inf
    p = s.shape[0]
    logdet = 2 * np.sum(np.log(np.diag(chol)))
    return logdet + np.trace(s @ np.linalg.inv(sig)) - np.linalg.slogdet(s)[1] - p


# ---------------------------------------------------------------- fitting
def start(ent, labels, s):
    th = np.zeros(len(labels))
    for t, l in enumerate(labels):
        if l.startswith("lam"):
            i = int(l[3:].split("_")[0]) if l[3:].split("_")[0].isdigit() else 0
            th[t] = 0.7 * np.sqrt(s[i, i]) if isinstance(ent["psi"][0][0], float) else 1.0
        elif l.startswith("th"):
            i = int(l[2:].split("_")[0])
            j = int(l[2:].split("_")[1])
            th[t] = s[i, i] / 2 if i == j else 0.0
        elif l.startswith("psi"):
            k, kk = (int(v) for v in l[3:].split("_"))
            if k == kk:
                first = next(i for i, row in enumerate(ent["lambda"]) if row[k] is not None)
                th[t] = s[first, first] / 2
        elif l.startswith("eq"):
            th[t] = 0.7
    return th


def ml_fit(ent, s, n, method="BFGS"):
    labels = free_labels(ent)
    p = s.shape[0]

    def f(th):
        return discrepancy(s, sigma(ent, labels, th))

    def grad(th):
        sig = sigma(ent, labels, th)
        k = np.linalg.inv(sig)
        w = k @ (sig - s) @ k
        jac = complex_step(lambda z: sigma(ent, labels, z), th)
        return jac.T @ w.ravel()

    t0 = time.perf_counter()
    opts = {"gtol": 1e-11, "maxiter": 20000} if method == "BFGS" else {"gtol": 1e-11, "ftol": 1e-15, "maxiter": 20000}
    res = optimize.minimize(f, start(ent, labels, s), jac=grad, method=method, options=opts)
    seconds = time.perf_counter() - t0
    th = res.x
    sig = sigma(ent, labels, th)
    out = {"labels": labels, "values": th.tolist(), "F": float(res.fun), "seconds": seconds,
           "optimizer": method, "gradient_max": float(np.max(np.abs(grad(th)))), "sigma": sig}
    if p <= 20:
        k = np.linalg.inv(sig)
        jac = complex_step(lambda z: sigma(ent, labels, z), th)
        info = (n - 1) / 2 * jac.T @ np.kron(k, k) @ jac
        acov = np.linalg.inv(info)
        out["acov"] = acov
        out["se"] = np.sqrt(np.diag(acov)).tolist()
        m = len(ent["psi"])
        pairs = [(i, j) for j in range(m) for i in range(j, m)]
        cj = complex_step(lambda z: latent_cov(ent, labels, z), th)
        rows = [i * m + j for i, j in pairs]
        cj = cj[rows, :]
        c = latent_cov(ent, labels, th)
        out["latent"] = {"pairs": pairs, "covariance": c.tolist(),
                         "covariance_acov": (cj @ acov @ cj.T).tolist()}
    return out


def indices(F, s, sig, n, df):
    p = s.shape[0]
    chisq = max((n - 1) * F, 0.0)
    base = (n - 1) * (np.sum(np.log(np.diag(s))) - np.linalg.slogdet(s)[1])
    base_df = p * (p - 1) // 2
    pval = stats.chi2.sf(chisq, df)
    rmsea = np.sqrt(max(chisq - df, 0) / (df * (n - 1)))

    def lam_for(target):
        if stats.ncx2.cdf(chisq, df, 1e-12) <= target:
            return 0.0
        hi = max(chisq, 1.0)
        while stats.ncx2.cdf(chisq, df, hi) > target:
            hi *= 2
        return optimize.brentq(lambda l: stats.ncx2.cdf(chisq, df, l) - target, 1e-12, hi, xtol=1e-13, rtol=1e-14)

    lo, hi = lam_for(0.95), lam_for(0.05)
    ci = [np.sqrt(lo / (df * (n - 1))), np.sqrt(hi / (df * (n - 1)))]
    dm, db = max(chisq - df, 0), max(base - base_df, chisq - df, 0)
    cfi = 1 - dm / db if db > 0 else 1.0
    tli = (base / base_df - chisq / df) / (base / base_df - 1)
    d = np.sqrt(np.diag(s))
    r = (s - sig) / np.outer(d, d)
    srmr = np.sqrt(np.sum(r[np.tril_indices(p)] ** 2) / (p * (p + 1) / 2))
    return {"chisq": chisq, "df": df, "p_value": pval, "rmsea": rmsea, "rmsea_ci": ci,
            "cfi": cfi, "tli": tli, "srmr": srmr, "baseline_chisq": base, "baseline_df": base_df}


# ---------------------------------------------------------------- simulation
def simulate(rng, lam, phi, theta_diag, n, beta=None):
    m = lam.shape[1]
    a = np.eye(m) if beta is None else np.linalg.inv(np.eye(m) - beta)
    eta = rng.multivariate_normal(np.zeros(m), phi, size=n) @ a.T
    x = eta @ lam.T + rng.normal(size=(n, lam.shape[0])) * np.sqrt(theta_diag)
    return x


def case(desc, s, n, method="BFGS"):
    ent = build(desc)
    res = ml_fit(ent, s, n, method)
    p = s.shape[0]
    df = p * (p + 1) // 2 - len(res["labels"])
    out = {"model": desc, "n": n, "cov": s.tolist(), "labels": res["labels"], "values": res["values"],
           "F": res["F"], "optimizer": res["optimizer"], "gradient_max": res["gradient_max"],
           "scipy_seconds": res["seconds"], "implied": res["sigma"].tolist()}
    if df > 0:
        out["indices"] = indices(res["F"], s, res["sigma"], n, df)
    if "se" in res:
        out["se"] = res["se"]
        out["latent"] = res["latent"]
    # Free entries with their label, so the Rust test can look each one up by position.
    cells = []
    for name in ("lambda", "beta", "psi", "theta"):
        for r, row in enumerate(ent[name]):
            for c, x in enumerate(row):
                if isinstance(x, str) and (name in ("lambda", "beta") or r >= c):
                    cells.append({"matrix": name, "row": r, "col": c, "label": x})
    out["cells"] = cells
    return out


def versions():
    return {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__}


def main():
    rng = np.random.default_rng(20240611)
    # Case cfa3: three correlated factors (4, 4, 3 items), one correlated error across factors.
    # The population has one cross-loading the model omits.
    lam = np.zeros((11, 3))
    lam[0:4, 0] = [0.8, 0.7, 0.6, 0.75]
    lam[4:8, 1] = [0.9, 0.65, 0.7, 0.5]
    lam[8:11, 2] = [0.7, 0.8, 0.6]
    lam *= np.array([1.0, 1.5, 2.0, 1.0, 1.2, 0.8, 1.0, 1.1, 1.0, 1.3, 0.9])[:, None]
    lam[10, 0] = 0.35  # a cross-loading the fitted model omits, so the fit is imperfect
    phi = np.array([[1, 0.4, 0.3], [0.4, 1, 0.5], [0.3, 0.5, 1]])
    x = simulate(rng, lam, phi, np.full(11, 0.5), 400)
    shared = rng.normal(size=400) * 0.4  # an error shared by items 0 and 4
    x[:, 0] += shared
    x[:, 4] += shared
    s_cfa = np.cov(x, rowvar=False)
    cfa3 = case({"p": 11, "groups": [[0, 1, 2, 3], [4, 5, 6, 7], [8, 9, 10]],
                 "identification": "unit_latent_variance", "error_covariances": [[0, 4]]}, s_cfa, 400)

    # Case path2: two latents with a path xi -> eta, first loadings fixed at 1.
    lam2 = np.zeros((6, 2))
    lam2[0:3, 0] = [1.0, 0.8, 1.2]
    lam2[3:6, 1] = [1.0, 0.9, 0.7]
    beta = np.array([[0, 0], [0.6, 0]])
    x = simulate(rng, lam2, np.diag([1.5, 0.8]), np.full(6, 0.6), 300, beta)
    s_path = np.cov(x, rowvar=False)
    path2 = case({"p": 6, "groups": [[0, 1, 2], [3, 4, 5]], "identification": "unit_first_loading",
                  "paths": [[0, 1]]}, s_path, 300)

    # Case chain3: single indicator (error variance fixed from a reliability of 0.8) -> eta1
    # (tau-equivalent: equal loadings) -> eta2, unit latent (residual) variances.
    lam3 = np.zeros((7, 3))
    lam3[0, 0] = 1.0
    lam3[1:4, 1] = [0.7, 0.7, 0.7]
    lam3[4:7, 2] = [0.9, 0.8, 0.6]
    beta3 = np.array([[0, 0, 0], [0.5, 0, 0], [0, 0.7, 0]])
    x = simulate(rng, lam3, np.eye(3), np.array([0.25, 0.5, 0.5, 0.5, 0.4, 0.4, 0.4]), 500, beta3)
    s_chain = np.cov(x, rowvar=False)
    chain3 = case({"p": 7, "groups": [[0], [1, 2, 3], [4, 5, 6]], "identification": "unit_latent_variance",
                   "paths": [[0, 1], [1, 2]], "fixed_error_variances": {"0": 0.2 * s_chain[0, 0]},
                   "equal_loadings": {"eq_eta1": [[1, 1], [2, 1], [3, 1]]}}, s_chain, 500)

    doc = {"generator": "make_fixtures.py", "versions": versions(), "seed": 20240611,
           "cfa3": cfa3, "path2": path2, "chain3": chain3}
    (HERE / "sem.json").write_text(json.dumps(doc, indent=1))

    # Reliability: alpha of the first cfa3 factor's items by numpy; omega from a scipy ML fit
    # of the one-factor model to those items.
    items = [0, 1, 2, 3]
    sub = s_cfa[np.ix_(items, items)]
    k = len(items)
    alpha = k / (k - 1) * (1 - np.trace(sub) / np.sum(sub))
    one = case({"p": 4, "groups": [[0, 1, 2, 3]], "identification": "unit_latent_variance"}, sub, 400)
    lab = dict(zip(one["labels"], one["values"]))
    lsum = sum(lab[f"lam{i}_0"] for i in range(4))
    tsum = sum(lab[f"th{i}_{i}"] for i in range(4))
    omega = lsum**2 / (lsum**2 + tsum)
    (HERE / "reliability.json").write_text(json.dumps(
        {"generator": "make_fixtures.py", "versions": versions(), "cov": sub.tolist(), "n": 400,
         "alpha": alpha, "omega": omega, "loadings": [lab[f"lam{i}_0"] for i in range(4)],
         "error_variances": [lab[f"th{i}_{i}"] for i in range(4)]}, indent=1))

    # Case cfa60x4: 60 items on 4 correlated factors (15 each), n = 1000: timing peer and a
    # large-model check of F and the estimates.
    lam4 = np.zeros((60, 4))
    for f in range(4):
        lam4[15 * f:15 * (f + 1), f] = rng.uniform(0.4, 0.9, 15)
    phi4 = 0.3 + 0.7 * np.eye(4)
    x = simulate(rng, lam4, phi4, 1 - np.sum(lam4**2, axis=1), 1000)
    s60 = np.cov(x, rowvar=False)
    big = case({"p": 60, "groups": [list(range(15 * f, 15 * (f + 1))) for f in range(4)],
                "identification": "unit_latent_variance"}, s60, 1000, method="L-BFGS-B")
    big["versions"] = versions()
    big["generator"] = "make_fixtures.py"
    (HERE / "cfa60x4.json").write_text(json.dumps(big))


if __name__ == "__main__":
    main()
