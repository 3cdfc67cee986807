"""Reference distribution-free sampling covariance of mixed correlations, for
crates/construe-stats/src/acov (Contributions::correlations).

Independent of the Rust code: every pair's two-step estimate is written as a stack of
estimating equations (M-estimation; Huber 1967, Stefanski & Boos 2002) and each respondent's
influence is IF_i = -A^{-1} Psi_i with A = (1/n) sum_i dPsi_i/dtheta by central numerical
differentiation (no analytic second derivatives):
  - Pearson r: moments (means, variances, covariance, divisor n) and the delta method
    (Browne 1984 / Steiger & Hakstian 1982 distribution-free correlations);
  - polychoric (Olsson 1979 two-step): thresholds Psi_tk = 1[x < k] - Phi(t_k) from the
    margins, then Psi_rho = d log P_ab / d rho, with P_ab from the bivariate normal CDF computed
    as Phi(h)Phi(k) + int_0^rho phi2(h, k, r) dr (Plackett 1954; scipy quad) and dP/drho the
    corner sum of phi2; thresholds' estimation accounted for as in Muthen (1984), Joreskog (1994);
  - polyserial (Olsson, Drasgow & Dorans 1982 two-step): Psi_mu = x - mu,
    Psi_sigma = (x - mu)^2 - (n-1)/n sigma^2 (sd with divisor n - 1), thresholds as above,
    Psi_rho = d log P(y | z) / d rho.
Empty categories of a pair are dropped (merged) before its thresholds. Each rho is refitted
here (brentq on the score). With c_ie = IF_e(i) / n_e on the pair's complete rows (0 elsewhere),
V = sum_i c_i c_i' for all 28 correlations. Also `v_normal`: the normal-theory covariance of
the same 28 correlations (n = 300) from the Wishart moments and the delta method.

Data: n = 300 from a one-factor model: items 0-3 five categories (item 3 never uses its top
category), items 4-5 binary (80/20), items 6-7 continuous and skewed; about 3% missing values
in items 0, 2, 5, 6. Run from this directory:
    python3 make_acov.py        # writes acov.json
"""

import json
import platform

import numpy as np
import scipy
from scipy import integrate, optimize
from scipy.stats import norm


def bvn_pdf(h, k, r):
    s = 1.0 - r * r
    return np.exp(-(h * h - 2 * r * h * k + k * k) / (2 * s)) / (2 * np.pi * np.sqrt(s))


def bvn_cdf(h, k, r):
    if h == -np.inf or k == -np.inf:
        return 0.0
    if h == np.inf:
        return norm.cdf(k)
    if k == np.inf:
        return norm.cdf(h)
    val, _ = integrate.quad(lambda t: bvn_pdf(h, k, t), 0.0, r, epsabs=1e-15, epsrel=1e-13, limit=200)
    return norm.cdf(h) * norm.cdf(k) + val


def corner_pdf(h, k, r):
    if not (np.isfinite(h) and np.isfinite(k)):
        return 0.0
    return bvn_pdf(h, k, r)


def pad(t):
    return np.concatenate([[-np.inf], t, [np.inf]])


def margin_thresholds(counts):
    return norm.ppf(np.cumsum(counts)[:-1] / counts.sum())


def jacobian(mean_psi, theta, step=1e-5):
    m = len(theta)
    a = np.zeros((m, m))
    for k in range(m):
        up, dn = theta.copy(), theta.copy()
        up[k] += step
        dn[k] -= step
        a[:, k] = (mean_psi(up) - mean_psi(dn)) / (2 * step)
    return a


# ---------------------------------------------------------------- Pearson
def pearson_if(x, y):
    n = len(x)
    mx, my = x.mean(), y.mean()
    dx, dy = x - mx, y - my
    vx, vy, c = (dx * dx).mean(), (dy * dy).mean(), (dx * dy).mean()
    r = c / np.sqrt(vx * vy)
    # IF of the moments (vx, vy, c); the means' IFs enter r with zero gradient.
    moments = np.stack([dx * dx - vx, dy * dy - vy, dx * dy - c])
    grad = np.array([-r / (2 * vx), -r / (2 * vy), 1 / np.sqrt(vx * vy)])
    return r, grad @ moments


# ---------------------------------------------------------------- polychoric
def polychoric_if(a, b):
    """a, b: complete integer codes. Returns (rho, IF per respondent)."""
    ka = np.unique(a)
    kb = np.unique(b)
    ia = np.searchsorted(ka, a)
    ib = np.searchsorted(kb, b)
    r_, c_ = len(ka), len(kb)
    n = len(a)
    counts = np.zeros((r_, c_))
    np.add.at(counts, (ia, ib), 1)
    w = counts / n
    ta = margin_thresholds(counts.sum(1))
    tb = margin_thresholds(counts.sum(0))

    def cells(theta):
        h = pad(theta[: r_ - 1])
        k = pad(theta[r_ - 1 : r_ + c_ - 2])
        rho = theta[-1]
        cdf = np.array([[bvn_cdf(hh, kk, rho) for kk in k] for hh in h])
        pdf = np.array([[corner_pdf(hh, kk, rho) for kk in k] for hh in h])
        p = cdf[1:, 1:] - cdf[:-1, 1:] - cdf[1:, :-1] + cdf[:-1, :-1]
        dp = pdf[1:, 1:] - pdf[:-1, 1:] - pdf[1:, :-1] + pdf[:-1, :-1]
        return p, dp

    def psi_rho(theta):
        p, dp = cells(theta)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(counts > 0, dp / p, 0.0)

    def score(rho):
        return np.sum(w * psi_rho(np.concatenate([ta, tb, [rho]])))

    rho = optimize.brentq(score, -0.99, 0.99, xtol=1e-13)
    theta = np.concatenate([ta, tb, [rho]])

    def mean_psi(th):
        out = []
        for k in range(r_ - 1):
            out.append(np.sum(w.sum(1)[: k + 1]) - norm.cdf(th[k]))
        for k in range(c_ - 1):
            out.append(np.sum(w.sum(0)[: k + 1]) - norm.cdf(th[r_ - 1 + k]))
        out.append(np.sum(w * psi_rho(th)))
        return np.array(out)

    amat = jacobian(mean_psi, theta)
    psi_cells = psi_rho(theta)
    # Per respondent stacked Psi.
    m = len(theta)
    psi = np.zeros((m, n))
    for k in range(r_ - 1):
        psi[k] = (ia <= k) - norm.cdf(theta[k])
    for k in range(c_ - 1):
        psi[r_ - 1 + k] = (ib <= k) - norm.cdf(theta[r_ - 1 + k])
    psi[-1] = psi_cells[ia, ib]
    infl = -np.linalg.solve(amat, psi)
    return rho, infl[-1]


# ---------------------------------------------------------------- polyserial
def polyserial_if(x, y):
    n = len(x)
    ky = np.unique(y)
    iy = np.searchsorted(ky, y)
    kk = len(ky)
    counts = np.bincount(iy, minlength=kk).astype(float)
    tau = margin_thresholds(counts)
    mu = x.mean()
    sd = x.std(ddof=1)
    c = (n - 1) / n

    def psi_rho_obs(th):
        m_, s_ = th[0], th[1]
        t = pad(th[2 : 2 + kk - 1])
        rho = th[-1]
        z = (x - m_) / s_
        s = np.sqrt(1 - rho * rho)
        lo, hi = t[iy], t[iy + 1]
        u_lo = np.where(np.isfinite(lo), (lo - rho * z) / s, -np.inf)
        u_hi = np.where(np.isfinite(hi), (hi - rho * z) / s, np.inf)
        p = norm.cdf(u_hi) - norm.cdf(u_lo)
        du_lo = np.where(np.isfinite(lo), (rho * np.where(np.isfinite(lo), lo, 0) - z) / s**3, 0.0)
        du_hi = np.where(np.isfinite(hi), (rho * np.where(np.isfinite(hi), hi, 0) - z) / s**3, 0.0)
        dp = norm.pdf(u_hi) * du_hi - norm.pdf(u_lo) * du_lo
        return dp / p

    def stacked(th):
        m_, s_ = th[0], th[1]
        out = [x - m_, (x - m_) ** 2 - c * s_ * s_]
        for k in range(kk - 1):
            out.append((iy <= k) - norm.cdf(th[2 + k]))
        out.append(psi_rho_obs(th))
        return np.array(out)

    def score(rho):
        return psi_rho_obs(np.concatenate([[mu, sd], tau, [rho]])).mean()

    rho = optimize.brentq(score, -0.99, 0.99, xtol=1e-13)
    theta = np.concatenate([[mu, sd], tau, [rho]])
    amat = jacobian(lambda th: stacked(th).mean(axis=1), theta)
    infl = -np.linalg.solve(amat, stacked(theta))
    return rho, infl[-1]


def main():
    rng = np.random.default_rng(20261205)
    n = 300
    loadings = np.array([0.75, 0.65, 0.7, 0.6, 0.7, 0.6, 0.8, 0.55])
    f = rng.standard_normal(n)
    latent = f[:, None] * loadings + rng.standard_normal((n, 8)) * np.sqrt(1 - loadings**2)
    kinds, levels, data = [], [], []
    cuts5 = [[-1.4, -0.5, 0.3, 1.2], [-1.0, -0.2, 0.6, 1.5], [-1.6, -0.8, 0.0, 0.9], [-1.2, -0.3, 0.7, 9.0]]
    for j in range(4):
        data.append(np.searchsorted(cuts5[j], latent[:, j]).astype(float))
        kinds.append("ordinal")
        levels.append(5)
    for j in (4, 5):
        data.append((latent[:, j] > norm.ppf(0.8)).astype(float))
        kinds.append("ordinal")
        levels.append(2)
    for j in (6, 7):
        v = latent[:, j]
        data.append(10 + 2 * (v + 0.3 * v * v))
        kinds.append("continuous")
        levels.append(0)
    for j in (0, 2, 5, 6):
        gone = rng.random(n) < 0.03
        data[j][gone] = np.nan
    p = 8
    elements, rhos, contrib = [], [], []
    for j in range(p):
        for l in range(j + 1, p):
            ok = ~np.isnan(data[j]) & ~np.isnan(data[l])
            x, y = data[j][ok], data[l][ok]
            if kinds[j] == "continuous" and kinds[l] == "continuous":
                rho, infl = pearson_if(x, y)
            elif kinds[j] == "ordinal" and kinds[l] == "ordinal":
                rho, infl = polychoric_if(x.astype(int), y.astype(int))
            elif kinds[j] == "continuous":
                rho, infl = polyserial_if(x, y.astype(int))
            else:
                rho, infl = polyserial_if(y, x.astype(int))
            col = np.zeros(n)
            col[ok] = infl / ok.sum()
            elements.append([j, l])
            rhos.append(rho)
            contrib.append(col)
    cmat = np.array(contrib).T
    v = cmat.T @ cmat

    # Normal theory for the same correlations, by another route than Olkin & Siotani's closed
    # form: the Wishart covariance of the sample covariances, cov(s_jl, s_mr) =
    # (s_jm s_lr + s_jr s_lm) / n (Anderson 2003, th. 3.4.4), carried through the Jacobian of
    # r_jl = s_jl / sqrt(s_jj s_ll) at S = R (delta method), with n = 300.
    r = np.eye(p)
    for (j, l), rho in zip(elements, rhos):
        r[j, l] = r[l, j] = rho
    cov_elems = [(j, l) for j in range(p) for l in range(j, p)]
    gamma = np.array([[(r[j, m] * r[l, q] + r[j, q] * r[l, m]) / n for (m, q) in cov_elems] for (j, l) in cov_elems])
    jac = np.zeros((len(elements), len(cov_elems)))
    for e, (j, l) in enumerate(elements):
        jac[e, cov_elems.index((j, l))] = 1.0
        jac[e, cov_elems.index((j, j))] = -r[j, l] / 2
        jac[e, cov_elems.index((l, l))] = -r[j, l] / 2
    v_normal = jac @ gamma @ jac.T

    def column(j):
        return [None if np.isnan(t) else (int(t) if kinds[j] == "ordinal" else float(t)) for t in data[j]]

    out = {
        "generator": "make_acov.py",
        "versions": {"python": platform.python_version(), "numpy": np.__version__, "scipy": scipy.__version__},
        "n": n,
        "kinds": kinds,
        "levels": levels,
        "columns": [column(j) for j in range(p)],
        "elements": elements,
        "rho": rhos,
        "v": v.tolist(),
        "v_normal": v_normal.tolist(),
    }
    with open("acov.json", "w") as fh:
        json.dump(out, fh, indent=None)
        fh.write("\n")


if __name__ == "__main__":
    main()
