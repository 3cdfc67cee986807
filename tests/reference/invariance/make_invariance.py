"""Independent multi-group ML reference fits (numpy + scipy) for the invariance engine's tests.

Data: two groups (n = 300 and 260) simulated once by numpy (fixed seed) from a two-construct
model with three items each; group 1 has a larger loading on item 1, a shifted intercept on
item 4, latent means (0.3, -0.2) and variances (1.2, 0.8), so the rungs fit differently.
Stored: each group's means and covariance with divisor n (the ML moments).

Model of group g: mu_g = nu_g + Lambda_g kappa_g, Sigma_g = Lambda_g Phi_g Lambda_g' + Theta_g.
Identification: group 0 (reference) kappa = 0, diag Phi = 1; group 1 the same at configural,
free latent variances from metric on, free latent means from scalar on (Sörbom 1974).
Discrepancy F = sum_g (n_g / N) [ln|Sigma_g| + tr(S_g Sigma_g^-1) - ln|S_g| - p
+ (m_g - mu_g)' Sigma_g^-1 (m_g - mu_g)], minimised by scipy.optimize.minimize (BFGS, then
Newton-CG polish) with the gradient from complex-step derivatives of mu(theta) and
Sigma(theta); chisq = N F, df = G p (p + 3) / 2 - q.
SEs: inverse of the expected information sum_g n_g / 2 [J_s' (Sigma^-1 kron Sigma^-1) J_s
+ 2 J_m' Sigma^-1 J_m] (J_s = dvec Sigma / dtheta, J_m = dmu / dtheta, complex step).
Score tests: for each loading (metric) and intercept (scalar) equality, the model with group
1's copy released, evaluated at the restricted estimates: LM = s' I^-1 s, s = -(N/2) dF/dtheta.
Levels: configural, metric, scalar, strict, and partial scalar with item 4's intercept
released in group 1.
Run: python3 make_invariance.py   (writes invariance.json here)
"""

import json
import platform
from pathlib import Path

import numpy as np
import scipy
from scipy import optimize

HERE = Path(__file__).resolve().parent
P, M, G = 6, 2, 2
CONSTRUCT = [0, 0, 0, 1, 1, 1]
NS = [300, 260]


def simulate():
    rng = np.random.default_rng(20261205)
    lam0 = np.array([0.8, 0.7, 0.6, 0.75, 0.65, 0.7])
    nu0 = np.array([3.0, 2.8, 3.2, 2.5, 3.1, 2.9])
    th0 = np.array([0.4, 0.5, 0.55, 0.45, 0.5, 0.5])
    groups = []
    for g, n in enumerate(NS):
        lam, nu = lam0.copy(), nu0.copy()
        kappa, phi = np.zeros(2), np.array([[1.0, 0.4], [0.4, 1.0]])
        if g == 1:
            lam[1] = 1.0
            nu[4] += 0.5
            kappa = np.array([0.3, -0.2])
            phi = np.array([[1.2, 0.35], [0.35, 0.8]])
        L = np.zeros((P, M))
        for i, c in enumerate(CONSTRUCT):
            L[i, c] = lam[i]
        eta = rng.multivariate_normal(kappa, phi, size=n)
        eps = rng.normal(size=(n, P)) * np.sqrt(th0)
        x = nu + eta @ L.T + eps
        mean = x.mean(axis=0)
        cov = (x - mean).T @ (x - mean) / n
        groups.append({"n": n, "mean": mean, "cov": cov})
    return groups


def spec(level, released):
    """Labels of every per-group entry: (kind, group, index) -> free label or fixed number."""
    kinds = {"configural": [], "metric": ["loading"], "scalar": ["loading", "intercept"],
             "strict": ["loading", "intercept", "residual"]}[level]
    labels = {}
    for g in range(G):
        for i in range(P):
            for kind in ("loading", "intercept", "residual"):
                equal = kind in kinds and (i, kind, g) not in released
                labels[(kind, g, i)] = f"{kind}{i}" if equal else f"{kind}{i}_g{g}"
        for c in range(M):
            labels[("kappa", g, c)] = f"kappa{c}_g{g}" if (g == 1 and "intercept" in kinds) else 0.0
            labels[("phi", g, (c, c))] = f"phi{c}{c}_g{g}" if (g == 1 and "loading" in kinds) else 1.0
        labels[("phi", g, (1, 0))] = f"phi10_g{g}"
    free = sorted({v for v in labels.values() if isinstance(v, str)})
    return labels, free


def moments(theta, labels, free):
    """Per group (mu, Sigma) for a (possibly complex) parameter vector."""
    idx = {name: k for k, name in enumerate(free)}
    val = lambda key: theta[idx[labels[key]]] if isinstance(labels[key], str) else labels[key]
    out = []
    for g in range(G):
        L = np.zeros((P, M), dtype=complex)
        for i, c in enumerate(CONSTRUCT):
            L[i, c] = val(("loading", g, i))
        nu = np.array([val(("intercept", g, i)) for i in range(P)], dtype=complex)
        th = np.array([val(("residual", g, i)) for i in range(P)], dtype=complex)
        kap = np.array([val(("kappa", g, c)) for c in range(M)], dtype=complex)
        off = val(("phi", g, (1, 0)))
        phi = np.array([[val(("phi", g, (0, 0))), off], [off, val(("phi", g, (1, 1)))]], dtype=complex)
        out.append((nu + L @ kap, L @ phi @ L.T + np.diag(th)))
    return out


def discrepancy(theta, labels, free, data):
    total = sum(d["n"] for d in data)
    f = 0.0
    for (mu, sig), d in zip(moments(theta, labels, free), data):
        mu, sig = mu.real, sig.real
        sign, ld = np.linalg.slogdet(sig)
        if sign <= 0:
            return 1e10
        si = np.linalg.inv(sig)
        r = d["mean"] - mu
        _, lds = np.linalg.slogdet(d["cov"])
        f += d["n"] / total * (ld + np.trace(d["cov"] @ si) - lds - P + r @ si @ r)
    return f


def jacobians(theta, labels, free):
    """Complex-step dmu/dtheta and dvec(Sigma)/dtheta per group."""
    h = 1e-30
    q = len(theta)
    jm = [np.zeros((P, q)) for _ in range(G)]
    js = [np.zeros((P * P, q)) for _ in range(G)]
    for k in range(q):
        t = theta.astype(complex)
        t[k] += 1j * h
        for g, (mu, sig) in enumerate(moments(t, labels, free)):
            jm[g][:, k] = mu.imag / h
            js[g][:, k] = sig.imag.reshape(-1) / h
    return jm, js


def gradient(theta, labels, free, data):
    total = sum(d["n"] for d in data)
    jm, js = jacobians(theta, labels, free)
    grad = np.zeros(len(theta))
    for g, ((mu, sig), d) in enumerate(zip(moments(theta, labels, free), data)):
        mu, sig = mu.real, sig.real
        si = np.linalg.inv(sig)
        r = d["mean"] - mu
        w = d["cov"] + np.outer(r, r)
        a = si - si @ w @ si
        grad += d["n"] / total * (js[g].T @ a.reshape(-1) - 2.0 * jm[g].T @ (si @ r))
    return grad


def information(theta, labels, free, data):
    jm, js = jacobians(theta, labels, free)
    info = np.zeros((len(theta), len(theta)))
    for g, ((mu, sig), d) in enumerate(zip(moments(theta, labels, free), data)):
        si = np.linalg.inv(sig.real)
        info += d["n"] / 2.0 * (js[g].T @ np.kron(si, si) @ js[g] + 2.0 * jm[g].T @ si @ jm[g])
    return info


def start(labels, free, data):
    theta = np.zeros(len(free))
    for k, name in enumerate(free):
        keys = [key for key, v in labels.items() if v == name]
        kind, g, idx = keys[0]
        d = data[g]
        if kind == "loading":
            theta[k] = 0.7 * np.sqrt(d["cov"][idx, idx])
        elif kind == "intercept":
            theta[k] = d["mean"][idx]
        elif kind == "residual":
            theta[k] = 0.5 * d["cov"][idx, idx]
        elif kind == "phi":
            theta[k] = 1.0 if idx[0] == idx[1] else 0.3
        else:
            theta[k] = 0.0
    return theta


def fit(level, released, data):
    labels, free = spec(level, released)
    f = lambda t: discrepancy(t, labels, free, data)
    g = lambda t: gradient(t, labels, free, data)
    res = optimize.minimize(f, start(labels, free, data), jac=g, method="BFGS", options={"gtol": 1e-11, "maxiter": 5000})
    total = sum(d["n"] for d in data)
    theta = res.x
    # Newton polish with the expected information (Fisher scoring) to full precision.
    for _ in range(20):
        step = np.linalg.solve(information(theta, labels, free, data) * 2.0 / total, g(theta))
        theta = theta - step
        if abs(step).max() < 1e-13:
            break
    info = information(theta, labels, free, data)
    acov = np.linalg.inv(info)
    se = np.sqrt(np.diag(acov))
    fmin = f(theta)
    df = G * P * (P + 3) // 2 - len(free)
    entries = []
    for (kind, grp, idx), v in labels.items():
        if isinstance(v, str):
            k = free.index(v)
            est, s = theta[k], se[k]
        else:
            est, s = v, None
        entries.append({"kind": kind, "group": grp, "index": list(idx) if isinstance(idx, tuple) else idx,
                        "est": float(est), "se": None if s is None else float(s)})
    return {"level": level, "released": [list(r) for r in released], "discrepancy": float(fmin),
            "chisq": float(total * fmin), "df": int(df), "q": len(free), "gradient_max": float(abs(g(theta)).max()),
            "entries": entries, "theta": theta, "labels": labels, "free": free}


def score_test(base, release, data):
    """LM for releasing `release` = (item, kind, group) at the restricted estimates of `base`."""
    labels, free = spec(base["level"], [tuple(r) for r in base["released"]] + [release])
    theta = np.zeros(len(free))
    old = dict(zip(base["free"], base["theta"]))
    for k, name in enumerate(free):
        key = next(key for key, v in labels.items() if v == name)
        base_label = base["labels"][key]
        theta[k] = old[base_label]
    total = sum(d["n"] for d in data)
    s = -(total / 2.0) * gradient(theta, labels, free, data)
    return float(s @ np.linalg.solve(information(theta, labels, free, data), s))


def main():
    data = simulate()
    cases = []
    fits = {}
    for level, released in [("configural", []), ("metric", []), ("scalar", []), ("strict", []),
                            ("scalar", [(4, "intercept", 1)])]:
        res = fit(level, released, data)
        fits[(level, len(released))] = res
        cases.append(res)
    scores = []
    for level, kind in [("metric", "loading"), ("scalar", "intercept")]:
        base = fits[(level, 0)]
        for i in range(P):
            scores.append({"level": level, "item": i, "kind": kind, "group": 1,
                           "statistic": score_test(base, (i, kind, 1), data)})
    out = {
        "generator": "make_invariance.py",
        "versions": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__},
        "items": P, "constructs": M, "item_construct": CONSTRUCT,
        "groups": [{"n": d["n"], "mean": d["mean"].tolist(), "cov": d["cov"].tolist()} for d in data],
        "fits": [{k: v for k, v in c.items() if k not in ("theta", "labels", "free")} for c in cases],
        "score_tests": scores,
    }
    (HERE / "invariance.json").write_text(json.dumps(out, indent=1) + "\n")
    for c in cases:
        print(c["level"], c["released"], "F", c["discrepancy"], "chisq", c["chisq"], "df", c["df"], "grad", c["gradient_max"])
    for s in scores:
        print(s)


if __name__ == "__main__":
    main()
