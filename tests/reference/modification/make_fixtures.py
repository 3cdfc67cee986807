"""Reference modification indices, expected parameter changes and standardized residuals
for two small ML confirmatory factor models, computed independently of construe with numpy
and scipy from the published formulas:

- ML discrepancy F = ln|Sigma| + tr(S Sigma^-1) - ln|S| - p, minimised by scipy.optimize
  (BFGS with the gradient tr(K (Sigma - S) K dSigma_t), Joreskog 1969), dSigma_t by central
  differences of an explicit Sigma(theta) (exact here: Sigma is quadratic in theta).
- Modification index of a parameter fixed at zero (Sorbom 1989): with g the gradient of F and
  H its expected Hessian, H_tu = tr(K dSigma_t K dSigma_u), over the free parameters F and
  the candidate j, MI_j = (n - 1)/2 g_j^2 / (H_jj - H_jF H_FF^-1 H_Fj); (n - 1) is the
  multiplier of F in the chi-square statistic.
- Expected parameter change (Saris, Satorra & Sorbom 1987; Sorbom 1989):
  EPC_j = -g_j / (H_jj - H_jF H_FF^-1 H_Fj); completely standardized (Bollen 1989, p. 349):
  loading x sqrt(phi_kk / sigma_ii), error covariance / sqrt(sigma_ii sigma_jj).
- Power of the MI test against a standardized change delta (Saris, Satorra & van der Veld
  2009): P(ncx2(1, MI (delta / std EPC)^2) > 3.84), delta = 0.1 for error covariances and 0.2
  for loadings.
- Standardized residuals: (s_jl - sigma_jl) / sqrt(diag(Gamma - Delta (Delta' W Delta)^-1
  Delta') / (n - 1)), with Gamma = 2 D+ (Sigma x Sigma) D+' and W = D' (K x K) D / 2 built from
  the duplication matrix D (Magnus & Neudecker 1988; Browne 1984), Delta = d vech Sigma / d theta.

Run: python3 tests/reference/modification/make_fixtures.py  (writes fixtures.json beside it)
"""

import json
import os

import numpy as np
import scipy
from scipy import optimize, stats

P, M = 8, 2
GROUPS = [[0, 1, 2, 3], [4, 5, 6, 7]]
N = 400


def population():
    lam = np.zeros((P, M))
    lam[:4, 0] = [0.8, 0.7, 0.75, 0.6]
    lam[4:, 1] = [0.7, 0.8, 0.65, 0.7]
    lam[3, 1] = 0.3  # a planted cross-loading
    phi = np.array([[1.0, 0.4], [0.4, 1.0]])
    sig = lam @ phi @ lam.T
    theta = np.diag(1.0 - np.diag(sig))
    theta[1, 5] = theta[5, 1] = 0.15  # a planted correlated error
    sig = sig + theta
    scale = np.diag([1.0, 1.5, 0.8, 2.0, 1.2, 0.9, 1.1, 1.3])
    return scale @ sig @ scale


def sample(sig):
    rng = np.random.default_rng(20261205)
    x = rng.multivariate_normal(np.zeros(P), sig, size=N)
    return np.cov(x, rowvar=False)


class Model:
    """Free parameters: loadings of GROUPS, phi_21, the error variances, extra error covariances."""

    def __init__(self, extra_theta, extra_lambda=()):
        self.entries = []
        for k, g in enumerate(GROUPS):
            for i in g:
                self.entries.append(("L", i, k))
        for i, k in extra_lambda:
            self.entries.append(("L", i, k))
        self.entries.append(("Phi", 1, 0))
        for i in range(P):
            self.entries.append(("T", i, i))
        for i, j in extra_theta:
            self.entries.append(("T", i, j))

    def matrices(self, th):
        lam, phi, theta = np.zeros((P, M)), np.eye(M), np.zeros((P, P))
        for (kind, r, c), v in zip(self.entries, th):
            if kind == "L":
                lam[r, c] = v
            elif kind == "Phi":
                phi[r, c] = phi[c, r] = v
            else:
                theta[r, c] = theta[c, r] = v
        return lam, phi, theta

    def sigma(self, th):
        lam, phi, theta = self.matrices(th)
        return lam @ phi @ lam.T + theta

    def dsigma(self, th):
        h = 1e-5
        out = []
        for t in range(len(th)):
            up, dn = th.copy(), th.copy()
            up[t] += h
            dn[t] -= h
            out.append((self.sigma(up) - self.sigma(dn)) / (2 * h))
        return out


def discrepancy(model, s):
    ld_s = np.linalg.slogdet(s)[1]

    def f(th):
        sig = model.sigma(th)
        sign, ld = np.linalg.slogdet(sig)
        if sign <= 0:
            return 1e10
        return ld + np.trace(s @ np.linalg.inv(sig)) - ld_s - P

    def g(th):
        sig = model.sigma(th)
        k = np.linalg.inv(sig)
        w = k @ (sig - s) @ k
        return np.array([np.trace(w @ d) for d in model.dsigma(th)])

    return f, g


def fit(model, s):
    f, g = discrepancy(model, s)
    start = []
    for kind, r, c in model.entries:
        start.append({"L": 0.5 * np.sqrt(s[r, r]), "Phi": 0.3, "T": 0.5 * s[r, r] if r == c else 0.0}[kind])
    res = optimize.minimize(f, np.array(start), jac=g, method="BFGS", options={"gtol": 1e-11, "maxiter": 10000})
    th = res.x
    # Polish with Fisher scoring (the same F; Newton on the expected Hessian).
    for _ in range(50):
        sig = model.sigma(th)
        k = np.linalg.inv(sig)
        ds = model.dsigma(th)
        h = np.array([[np.trace(k @ a @ k @ b) for b in ds] for a in ds])
        step = np.linalg.solve(h, g(th))
        th = th - step
        if np.abs(step).max() < 1e-14:
            break
    return th


def duplication(p):
    pairs = [(j, l) for j in range(p) for l in range(j, p)]
    d = np.zeros((p * p, len(pairs)))
    for e, (j, l) in enumerate(pairs):
        d[j * p + l, e] = 1.0
        d[l * p + j, e] = 1.0
    return d, pairs


def diagnose(name, model, s):
    th = fit(model, s)
    lam, phi, theta = model.matrices(th)
    sig = model.sigma(th)
    k = np.linalg.inv(sig)
    free = set(model.entries)
    candidates = [("T", i, j) for i in range(P) for j in range(i) if ("T", i, j) not in free and ("T", j, i) not in free]
    candidates += [("L", i, kk) for i in range(P) for kk in range(M) if ("L", i, kk) not in free]
    mods = []
    for cand in candidates:
        aug = Model([], [])
        aug.entries = model.entries + [cand]
        tha = np.append(th, 0.0)
        ds = aug.dsigma(tha)
        w = k @ (sig - s) @ k
        g = np.array([np.trace(w @ d) for d in ds])
        h = np.array([[np.trace(k @ a @ k @ b) for b in ds] for a in ds])
        q = len(th)
        hff, hfj, hjj = h[:q, :q], h[:q, q], h[q, q]
        dj = hjj - hfj @ np.linalg.solve(hff, hfj)
        mi = (N - 1) / 2 * g[q] ** 2 / dj
        epc = -g[q] / dj
        kind, i, j = cand
        if kind == "L":
            std = epc * np.sqrt(phi[j, j] / sig[i, i])
            delta = 0.2
        else:
            std = epc / np.sqrt(sig[i, i] * sig[j, j])
            delta = 0.1
        power = stats.ncx2.sf(stats.chi2.ppf(0.95, 1), 1, mi * (delta / std) ** 2)
        mods.append({"matrix": "theta" if kind == "T" else "lambda", "row": i, "col": j,
                     "mi": mi, "epc": epc, "std_epc": std, "power": power})
    # Standardized residuals.
    dmat, pairs = duplication(P)
    dplus = np.linalg.pinv(dmat)
    gamma = 2 * dplus @ np.kron(sig, sig) @ dplus.T
    wmat = dmat.T @ np.kron(k, k) @ dmat / 2
    ds = model.dsigma(th)
    delta_m = np.array([[d[j, l] for d in ds] for (j, l) in pairs])
    var = np.diag(gamma - delta_m @ np.linalg.inv(delta_m.T @ wmat @ delta_m) @ delta_m.T) / (N - 1)
    residuals = []
    for e, (j, l) in enumerate(pairs):
        if j == l:
            continue
        res = s[j, l] / np.sqrt(s[j, j] * s[l, l]) - sig[j, l] / np.sqrt(sig[j, j] * sig[l, l])
        residuals.append({"row": l, "col": j, "residual": res, "z": (s[j, l] - sig[j, l]) / np.sqrt(var[e])})
    f, _ = discrepancy(model, s)
    return {"name": name, "chisq": (N - 1) * f(th),
            "free": [list(map(lambda x: x if isinstance(x, int) else x, e)) for e in model.entries],
            "estimates": th.tolist(), "modifications": mods, "residuals": residuals}


def main():
    s = sample(population())
    cases = [diagnose("cfa", Model([]), s), diagnose("cfa_with_error_covariance", Model([(5, 1)]), s)]
    out = {"generator": "make_fixtures.py", "numpy": np.__version__, "scipy": scipy.__version__,
           "n": N, "groups": GROUPS, "s": s.tolist(), "cases": cases}
    with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "fixtures.json"), "w") as fh:
        json.dump(out, fh, indent=1)


if __name__ == "__main__":
    main()
