"""Independent reference values for construe's robust estimators (sem::robust), numpy + scipy.

Written from the published formulas, not from construe's code, and with a different
parametrization where one exists:

dwls_cfa, dwls_sem -- diagonally weighted least squares on a correlation matrix
  (Muthen, du Toit & Spisic 1997): minimise sum_{j<l} (r_jl - rho_jl(theta))^2 / v_jl,jl.
  Here the unit diagonal is eliminated by hand: rho is written in the free loadings and paths
  only (a free error variance is 1 - (Lambda C Lambda')_ii and never appears off the diagonal;
  the single indicator's loading is sqrt(rel / C_kk), an explicit function of the paths), and
  the fit is scipy.optimize.least_squares. Delta = d rho / d theta by central differences.
  Robust covariance (Delta'W Delta)^-1 Delta'W V W Delta (Delta'W Delta)^-1; derived
  quantities (error variances, the single indicator's loading) by the delta method.
  U = W - W Delta (Delta'W Delta)^-1 Delta'W; scaled-and-shifted statistic a T + b,
  a = sqrt(df / tr((UV)^2)), b = df - a tr(UV) (Asparouhov & Muthen 2010).
  Robust RMSEA sqrt(max(T - tr(UV), 0) / (n df)) (Brosseau-Liard, Savalei & Li 2012;
  Savalei 2018) with the interval of the noncentrality of a T + b (scipy ncx2 + brentq)
  divided by a n df; robust CFI and TLI (Brosseau-Liard & Savalei 2014) against the zero
  correlation baseline (T_B = sum r^2 / v, tr(U_B V) = number of correlations).
ml_cfa -- ML on the sample covariance of non-normal continuous rows: scipy BFGS, polished by
  Gauss-Newton on the ML weight; sandwich covariance (Delta'W Delta)^-1 Delta'W V W Delta
  (Delta'W Delta)^-1 with W = D'(K kron K)D / 2 (explicit duplication matrix D, numpy.kron)
  and V Browne's (1984) distribution-free covariance of the sample covariances (divisor n,
  over n); Satorra-Bentler (1994) scaled statistic T / c, c = (n - 1) tr(UV) / df; robust
  RMSEA, CFI, TLI as above with N = n - 1 (baseline: independence model, tr(U_B V) from
  W_B at diag S with the variances projected out).

The correlation matrices and V of the DWLS cases come from simulated skewed continuous rows
(Pearson correlations, V by the delta method from Browne's distribution-free Gamma); any
valid pair (r, V) would do, these are committed so the Rust tests need no data.
Run: python3 make_fixtures.py   (writes fixtures.json here)
"""

import json
import platform
from pathlib import Path

import numpy as np
import scipy
from scipy import optimize, stats

HERE = Path(__file__).resolve().parent
RNG = np.random.default_rng(20261205)


def skewed_rows(lam_rows, latent_cov, n):
    """x = Lambda f + e with chi-square(3) errors scaled to the stated error variances."""
    p, m = lam_rows.shape
    f = RNG.multivariate_normal(np.zeros(m), latent_cov, size=n)
    err_var = 1.0 - np.einsum("ik,kl,il->i", lam_rows, latent_cov, lam_rows)
    e = (RNG.chisquare(3, size=(n, p)) - 3.0) / np.sqrt(6.0) * np.sqrt(err_var)
    return f @ lam_rows.T + e


def browne_gamma(x):
    """Distribution-free covariance of the covariances (divisor n), over vech j <= l, / n."""
    n, p = x.shape
    z = x - x.mean(axis=0)
    el = [(j, l) for j in range(p) for l in range(j, p)]
    d = np.stack([z[:, j] * z[:, l] for j, l in el], axis=1)
    d = d - d.mean(axis=0)
    return el, d.T @ d / n / n


def correlation_acov(x):
    """r and the acov of its off-diagonal elements: delta method r = s_jl / sqrt(s_jj s_ll)."""
    n, p = x.shape
    el, g = browne_gamma(x)
    s = np.cov(x.T, bias=True)
    pos = {e: i for i, e in enumerate(el)}
    off = [(j, l) for j in range(p) for l in range(j + 1, p)]
    jac = np.zeros((len(off), len(el)))
    for a, (j, l) in enumerate(off):
        sd = np.sqrt(s[j, j] * s[l, l])
        r = s[j, l] / sd
        jac[a, pos[(j, l)]] = 1.0 / sd
        jac[a, pos[(j, j)]] = -0.5 * r / s[j, j]
        jac[a, pos[(l, l)]] = -0.5 * r / s[l, l]
    r = s / np.sqrt(np.outer(np.diag(s), np.diag(s)))
    return r, off, jac @ g @ jac.T


def num_jacobian(f, x, h=1e-6):
    f0 = f(x)
    jac = np.zeros((len(f0), len(x)))
    for t in range(len(x)):
        up, down = x.copy(), x.copy()
        up[t] += h
        down[t] -= h
        jac[:, t] = (f(up) - f(down)) / (2 * h)
    return jac


def noncentrality(x, df, target):
    if stats.chi2.cdf(x, df) <= target:
        return 0.0
    hi = max(x, 1.0)
    while stats.ncx2.cdf(x, df, hi) > target:
        hi *= 2
    return optimize.brentq(lambda lam: stats.ncx2.cdf(x, df, lam) - target, 1e-12, hi, xtol=1e-14, rtol=1e-14)


def robust_fit_block(T, tr, tr2, df, TB, trB, dfB, N, scale, shift):
    chisq = max(scale * T + shift, 0.0)
    excess = max(T - tr, 0.0)
    denom = max(TB - trB, T - tr, 0.0)
    lo = noncentrality(chisq, df, 0.95)
    hi = noncentrality(chisq, df, 0.05)
    return {
        "chisq": chisq,
        "df": df,
        "p": float(stats.chi2.sf(chisq, df)),
        "rmsea": float(np.sqrt(excess / (N * df))),
        "rmsea_ci": [float(np.sqrt(lo / (scale * N * df))), float(np.sqrt(hi / (scale * N * df)))],
        "cfi": 1.0 - excess / denom if denom > 0 else 1.0,
        "tli": 1.0 - ((T - tr) / df) / ((TB - trB) / dfB),
    }


def dwls_case(name, lam_pop, latent_pop, n, rho_of, theta0, names, derived):
    """rho_of(theta) -> full implied correlation matrix (unit diagonal by construction)."""
    x = skewed_rows(lam_pop, latent_pop, n)
    r, off, v = correlation_acov(x)
    w = 1.0 / np.diag(v)
    rvec = np.array([r[j, l] for j, l in off])

    def rho(theta):
        m = rho_of(theta)
        return np.array([m[j, l] for j, l in off])

    sol = optimize.least_squares(lambda t: (rvec - rho(t)) * np.sqrt(w), theta0, xtol=1e-15, ftol=1e-15, gtol=1e-15)
    theta = sol.x
    delta = num_jacobian(rho, theta)
    W = np.diag(w)
    H = delta.T @ W @ delta
    Hinv = np.linalg.inv(H)
    acov = Hinv @ delta.T @ W @ v @ W @ delta @ Hinv
    e = rvec - rho(theta)
    T = float(e @ W @ e)
    U = W - W @ delta @ Hinv @ delta.T @ W
    UV = U @ v
    tr, tr2 = float(np.trace(UV)), float(np.trace(UV @ UV))
    df = len(off) - len(theta)
    a = np.sqrt(df / tr2)
    b = df - a * tr
    TB = float(rvec @ W @ rvec)
    params = {nm: {"est": float(theta[i]), "se": float(np.sqrt(acov[i, i]))} for i, nm in enumerate(names)}
    for nm, fn in derived.items():
        g = num_jacobian(lambda t: np.array([fn(t)]), theta)[0]
        params[nm] = {"est": float(fn(theta)), "se": float(np.sqrt(g @ acov @ g))}
    return {
        "name": name,
        "n": n,
        "r": r.tolist(),
        "v": v.tolist(),
        "elements": off,
        "parameters": params,
        "naive": T,
        "trace": tr,
        "trace_squared": tr2,
        "scale": float(a),
        "shift": float(b),
        "baseline_naive": TB,
        "fit": robust_fit_block(T, tr, tr2, df, TB, len(off), len(off), n, a, b),
    }


def dwls_cfa():
    lam = np.array([[0.8, 0], [0.7, 0], [0.6, 0], [0, 0.75], [0, 0.65], [0, 0.55]])
    phi = np.array([[1, 0.4], [0.4, 1]])

    def rho_of(t):
        L = np.zeros((6, 2))
        L[:3, 0], L[3:, 1] = t[:3], t[3:6]
        P = np.array([[1, t[6]], [t[6], 1]])
        return L @ P @ L.T

    names = ["x1", "x2", "x3", "x4", "x5", "x6", "phi"]
    derived = {f"theta_x{i + 1}": (lambda t, i=i: 1 - t[i] ** 2) for i in range(6)}
    return dwls_case("dwls_cfa", lam, phi, 600, rho_of, np.array([0.7] * 6 + [0.3]), names, derived)


def dwls_sem():
    # f1 -> f2 -> f3; f3 measured by x7 alone with reliability 0.7; unit variance of f1 and
    # unit residual variances of f2, f3 (as construe's UnitLatentVariance in a SEM).
    b21, b32 = 0.5, 0.6
    A = np.linalg.inv(np.eye(3) - np.array([[0, 0, 0], [b21, 0, 0], [0, b32, 0]]))
    C = A @ A.T
    d = np.sqrt(np.diag(C))
    Cs = C / np.outer(d, d)
    lam = np.array([[0.8, 0, 0], [0.7, 0, 0], [0.6, 0, 0], [0, 0.75, 0], [0, 0.7, 0], [0, 0.6, 0], [0, 0, np.sqrt(0.7)]])

    def parts(t):
        B = np.zeros((3, 3))
        B[1, 0], B[2, 1] = t[6], t[7]
        A = np.linalg.inv(np.eye(3) - B)
        C = A @ A.T
        L = np.zeros((7, 3))
        L[:3, 0], L[3:6, 1] = t[:3], t[3:6]
        L[6, 2] = np.sqrt(0.7 / C[2, 2])
        return L, C

    def rho_of(t):
        L, C = parts(t)
        return L @ C @ L.T

    names = ["x1", "x2", "x3", "x4", "x5", "x6", "b21", "b32"]
    derived = {"x7": lambda t: parts(t)[0][6, 2]}
    for i in range(6):
        derived[f"theta_x{i + 1}"] = lambda t, i=i: 1 - (parts(t)[0] @ parts(t)[1] @ parts(t)[0].T)[i, i]
    start = np.array([0.4, 0.4, 0.4, 0.3, 0.3, 0.3, 0.3, 0.3])
    return dwls_case("dwls_sem", lam, Cs, 800, rho_of, start, names, derived)


def duplication(p):
    el = [(j, l) for j in range(p) for l in range(j, p)]
    D = np.zeros((p * p, len(el)))
    for a, (j, l) in enumerate(el):
        D[j * p + l, a] = 1
        D[l * p + j, a] = 1
    return el, D


def ml_cfa():
    lam = np.array([[0.8, 0], [0.7, 0], [0.6, 0], [0, 0.75], [0, 0.65], [0, 0.55]])
    phi = np.array([[1, 0.3], [0.3, 1]])
    n, p = 500, 6
    x = skewed_rows(lam, phi, n) * np.array([1.0, 2.0, 0.5, 1.5, 1.0, 3.0])
    S = np.cov(x.T)  # divisor n - 1, as the ML fit takes it
    el, v = browne_gamma(x)
    _, D = duplication(p)

    def sigma(t):
        L = np.zeros((6, 2))
        L[:3, 0], L[3:, 1] = t[:3], t[3:6]
        P = np.array([[1, t[6]], [t[6], 1]])
        return L @ P @ L.T + np.diag(t[7:13])

    lds = np.linalg.slogdet(S)[1]

    def F(t):
        Sg = sigma(t)
        sign, ld = np.linalg.slogdet(Sg)
        if sign <= 0:
            return 1e10
        return ld + np.trace(S @ np.linalg.inv(Sg)) - lds - p

    def vech(m):
        return np.array([m[j, l] for j, l in el])

    t0 = np.concatenate([np.sqrt(np.diag(S)) * 0.7, [0.2], np.diag(S) * 0.5])
    t = optimize.minimize(F, t0, method="BFGS", options={"gtol": 1e-10, "maxiter": 10000}).x
    for _ in range(50):  # Gauss-Newton on the ML weight at Sigma(t): scoring, to full precision
        K = np.linalg.inv(sigma(t))
        W = 0.5 * D.T @ np.kron(K, K) @ D
        delta = num_jacobian(lambda u: vech(sigma(u)), t)
        step = np.linalg.solve(delta.T @ W @ delta, delta.T @ W @ (vech(S) - vech(sigma(t))))
        t = t + step
        if np.max(np.abs(step)) < 1e-13:
            break
    K = np.linalg.inv(sigma(t))
    W = 0.5 * D.T @ np.kron(K, K) @ D
    delta = num_jacobian(lambda u: vech(sigma(u)), t)
    Hinv = np.linalg.inv(delta.T @ W @ delta)
    acov = Hinv @ delta.T @ W @ v @ W @ delta @ Hinv
    info_acov = Hinv / (n - 1)
    U = W - W @ delta @ Hinv @ delta.T @ W
    df = len(el) - len(t)
    T = (n - 1) * F(t)
    tr = (n - 1) * float(np.trace(U @ v))
    c = tr / df
    TB = (n - 1) * (np.sum(np.log(np.diag(S))) - lds)
    KB = np.diag(1 / np.diag(S))
    WB = 0.5 * D.T @ np.kron(KB, KB) @ D
    deltaB = np.zeros((len(el), p))
    for a, (j, l) in enumerate(el):
        if j == l:
            deltaB[a, j] = 1
    UB = WB - WB @ deltaB @ np.linalg.inv(deltaB.T @ WB @ deltaB) @ deltaB.T @ WB
    trB = (n - 1) * float(np.trace(UB @ v))
    dfB = p * (p - 1) // 2
    names = ["x1", "x2", "x3", "x4", "x5", "x6", "phi"] + [f"theta_x{i + 1}" for i in range(6)]
    params = {
        nm: {"est": float(t[i]), "se": float(np.sqrt(acov[i, i])), "se_information": float(np.sqrt(info_acov[i, i]))}
        for i, nm in enumerate(names)
    }
    return {
        "name": "ml_cfa",
        "n": n,
        "s": S.tolist(),
        "v": v.tolist(),
        "elements": el,
        "parameters": params,
        "naive": float(T),
        "trace": tr,
        "scale": 1 / c,
        "baseline_naive": float(TB),
        "baseline_trace": trB,
        "fit": robust_fit_block(float(T), tr, None, df, float(TB), trB, dfB, n - 1, 1 / c, 0.0),
    }


def main():
    out = {
        "generator": "tests/reference/robust/make_fixtures.py",
        "versions": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__},
        "cases": [dwls_cfa(), dwls_sem(), ml_cfa()],
    }
    (HERE / "fixtures.json").write_text(json.dumps(out, indent=1) + "\n")


if __name__ == "__main__":
    main()
