"""Reference values for construe's ordinal multi-group DWLS (groups_ordinal), written
independently of the Rust code from the model's definition.

Model (theta parametrization; Millsap & Yun-Tein 2004; identification of Wu & Estabrook 2016):
group g, item j on construct f(j): s_j^2 = lam_j^2 phi_ff + theta_j,
standardized threshold t_jc = (tau_jc - nu_j - lam_j kappa_f) / s_j,
polychoric r_jl = lam_j lam_l phi_{f(j) f(l)} / (s_j s_l).
DWLS discrepancy T = sum_g sum_e w_e (stat_e - implied_e)^2, w_e = 1 / V_g[e, e].
Robust: acov = H^-1 J'W V W J H^-1, H = J'W J; U = W - W J H^-1 J'W; tr(UV), tr((UV)^2).
Difference / score tests (Satorra 2000; Asparouhov & Muthen 2006, 2010): U_d = P1 - P0 with
P = W J (J'W J)^+ J'W, J0 the restricted model's Jacobian and J1 the restricted model with the
released parameters made free, both at the restricted estimate; a = sqrt(df / tr((U_d V)^2)),
b = df - a tr(U_d V), statistic a T_d + b on df = rank gain.

Two groups, six items (categories 5, 5, 4 | 5, 3, 2) on two constructs. Input statistics are
population values of a model with group differences plus seeded noise; the sampling
covariances are made up (seeded), positive definite. Run: python3 generate.py > reference.json
"""
import json
import sys

import numpy as np
import scipy
from scipy.optimize import least_squares
from scipy.stats import chi2

CATS = [5, 5, 4, 5, 3, 2]
CONSTRUCT = [0, 0, 0, 1, 1, 1]
P = len(CATS)
M = 2
G = 2
N = [500, 450]


def names(g):
    out = []
    for j in range(P):
        out += [f"tau{g}_{j}_{c}" for c in range(CATS[j] - 1)]
    out += [f"nu{g}_{j}" for j in range(P)]
    out += [f"lam{g}_{j}" for j in range(P)]
    out += [f"theta{g}_{j}" for j in range(P)]
    out += [f"kappa{g}_{f}" for f in range(M)]
    out += [f"phi{g}_{a}{b}" for a in range(M) for b in range(a + 1)]
    return out


ALL = names(0) + names(1)


def phi(par, g, a, b):
    a, b = max(a, b), min(a, b)
    return par[f"phi{g}_{a}{b}"]


def implied(par, g):
    s = [np.sqrt(par[f"lam{g}_{j}"] ** 2 * phi(par, g, CONSTRUCT[j], CONSTRUCT[j]) + par[f"theta{g}_{j}"]) for j in range(P)]
    out = []
    for j in range(P):
        loc = par[f"nu{g}_{j}"] + par[f"lam{g}_{j}"] * par[f"kappa{g}_{CONSTRUCT[j]}"]
        out += [(par[f"tau{g}_{j}_{c}"] - loc) / s[j] for c in range(CATS[j] - 1)]
    for j in range(P):
        for l in range(j + 1, P):
            out.append(par[f"lam{g}_{j}"] * par[f"lam{g}_{l}"] * phi(par, g, CONSTRUCT[j], CONSTRUCT[l]) / (s[j] * s[l]))
    return np.array(out)


def spec(level, released=()):
    """name -> float (fixed) or str (key of a free parameter; shared keys are equalities).
    level: 0 configural, 1 thresholds, 2 + loadings, 3 + intercepts, 4 + unique variances.
    released: (kind, item) pairs freed in group 1; a released threshold frees the whole item."""
    sp = {}
    for j in range(P):
        for c in range(CATS[j] - 1):
            sp[f"tau0_{j}_{c}"] = f"tau0_{j}_{c}"
        sp[f"nu0_{j}"] = 0.0
        sp[f"lam0_{j}"] = f"lam0_{j}"
        sp[f"theta0_{j}"] = 1.0
    for f in range(M):
        sp[f"kappa0_{f}"] = 0.0
        sp[f"phi0_{f}{f}"] = 1.0
    sp["phi0_10"] = "phi0_10"
    rel = set(released)
    for j in range(P):
        thr_eq = level >= 1 and ("threshold", j) not in rel
        for c in range(CATS[j] - 1):
            sp[f"tau1_{j}_{c}"] = f"tau0_{j}_{c}" if thr_eq else f"tau1_{j}_{c}"
        lam_eq = thr_eq and level >= 2 and ("loading", j) not in rel
        sp[f"lam1_{j}"] = f"lam0_{j}" if lam_eq else f"lam1_{j}"
        if not thr_eq:
            sp[f"nu1_{j}"] = 0.0
            sp[f"theta1_{j}"] = 1.0
        else:
            sp[f"nu1_{j}"] = 0.0 if (level >= 3 and ("intercept", j) not in rel) else f"nu1_{j}"
            if CATS[j] == 2 or (level >= 4 and ("residual", j) not in rel):
                sp[f"theta1_{j}"] = 1.0
            else:
                sp[f"theta1_{j}"] = f"theta1_{j}"
    for f in range(M):
        sp[f"kappa1_{f}"] = f"kappa1_{f}" if level >= 3 else 0.0
        sp[f"phi1_{f}{f}"] = f"phi1_{f}{f}" if level >= 2 else 1.0
    sp["phi1_10"] = "phi1_10"
    return sp


def keys(sp):
    out = []
    for n in ALL:
        v = sp[n]
        if isinstance(v, str) and v not in out:
            out.append(v)
    return out


def full(sp, ks, x):
    val = dict(zip(ks, x))
    return {n: (val[v] if isinstance(v, str) else v) for n, v in sp.items()}


def stacked(par):
    return np.concatenate([implied(par, g) for g in range(G)])


def jacobian(sp, ks, x, h=1e-6):
    cols = []
    for i in range(len(x)):
        up, dn = x.copy(), x.copy()
        up[i] += h
        dn[i] -= h
        cols.append((stacked(full(sp, ks, up)) - stacked(full(sp, ks, dn))) / (2 * h))
    return np.array(cols).T


def proj(J, W):
    H = J.T @ (W[:, None] * J)
    Hp = np.linalg.pinv(H, rcond=1e-10, hermitian=True)
    WJ = W[:, None] * J
    return WJ @ Hp @ WJ.T, np.linalg.matrix_rank(H, tol=1e-9 * np.abs(np.linalg.eigvalsh(H)).max())


# ---- input statistics ------------------------------------------------------------------
rng = np.random.default_rng(20261205)
truth = {}
for g in range(G):
    for j in range(P):
        for c in range(CATS[j] - 1):
            base = np.linspace(-1.6, 1.4, CATS[j] - 1)[c] if CATS[j] > 2 else 0.3
            truth[f"tau{g}_{j}_{c}"] = 1.3 * base + 0.05 * j
        truth[f"nu{g}_{j}"] = 0.0
        truth[f"lam{g}_{j}"] = [1.0, 1.2, 0.9, 1.1, 0.8, 1.0][j]
        truth[f"theta{g}_{j}"] = 1.0
    truth[f"kappa{g}_0"] = 0.0
    truth[f"kappa{g}_1"] = 0.0
    truth[f"phi{g}_00"] = 1.0
    truth[f"phi{g}_11"] = 1.0
    truth[f"phi{g}_10"] = 0.45
truth["nu1_2"] = 0.4  # item 2's thresholds shifted in group 1
truth["lam1_4"] = 0.4  # item 4's loading differs
truth["kappa1_0"] = 0.3
truth["kappa1_1"] = -0.2
truth["phi1_00"] = 1.2
truth["phi1_11"] = 0.8
truth["phi1_10"] = 0.5

K = len(implied(truth, 0))
groups = []
for g in range(G):
    pop = implied(truth, g)
    n_tau = sum(c - 1 for c in CATS)
    var = np.where(np.arange(K) < n_tau, 2.5, 1.2) / N[g] * (1 + 0.3 * rng.random(K))
    A = rng.normal(size=(K, K))
    C = A @ A.T / K + 2 * np.eye(K)
    d = np.sqrt(np.diag(C))
    C = C / np.outer(d, d)
    V = np.sqrt(np.outer(var, var)) * C
    stats = pop + rng.multivariate_normal(np.zeros(K), V)
    groups.append({"n": N[g], "values": stats.tolist(), "acov": V.tolist()})

S = np.concatenate([np.array(gr["values"]) for gr in groups])
W = np.concatenate([1 / np.diag(np.array(gr["acov"])) for gr in groups])
Vblocks = [np.array(gr["acov"]) for gr in groups]
Vfull = np.zeros((G * K, G * K))
for g in range(G):
    Vfull[g * K:(g + 1) * K, g * K:(g + 1) * K] = Vblocks[g]


def start(sp, ks):
    s0 = {}
    for g in range(G):
        for j in range(P):
            for c in range(CATS[j] - 1):
                s0[f"tau{g}_{j}_{c}"] = np.linspace(-1.6, 1.4, CATS[j] - 1)[c] * 1.4 if CATS[j] > 2 else 0.4
            s0[f"nu{g}_{j}"] = 0.0
            s0[f"lam{g}_{j}"] = 1.0
            s0[f"theta{g}_{j}"] = 1.0
        for f in range(M):
            s0[f"kappa{g}_{f}"] = 0.0
            s0[f"phi{g}_{f}{f}"] = 1.0
        s0[f"phi{g}_10"] = 0.3
    return np.array([s0[k] for k in ks])


def fit(level, released=()):
    sp = spec(level, released)
    ks = keys(sp)
    sw = np.sqrt(W)

    def res(x):
        return sw * (S - stacked(full(sp, ks, x)))

    def jac(x):
        return -sw[:, None] * jacobian(sp, ks, x)

    r = least_squares(res, start(sp, ks), jac=jac, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=20000)
    x = r.x
    par = full(sp, ks, x)
    e = S - stacked(par)
    T = float(np.sum(W * e * e))
    J = jacobian(sp, ks, x)
    WJ = W[:, None] * J
    H = J.T @ WJ
    Hi = np.linalg.inv(H)
    acov = Hi @ (WJ.T @ Vfull @ WJ) @ Hi
    se = {}
    for n in ALL:
        v = sp[n]
        if isinstance(v, str):
            i = ks.index(v)
            se[n] = float(np.sqrt(acov[i, i]))
    U = np.diag(W) - WJ @ Hi @ WJ.T
    UV = U @ Vfull
    df = len(S) - len(ks)
    tr1, tr2 = float(np.trace(UV)), float(np.sum(UV * UV.T))
    return {
        "level": level,
        "released": [list(x) for x in released],
        "discrepancy": T,
        "df": df,
        "free": len(ks),
        "trace": tr1,
        "trace_squared": tr2,
        "estimates": {n: float(par[n]) for n in ALL},
        "se": se,
        "_sp": sp,
        "_ks": ks,
        "_x": x,
        "_e": e,
    }


def released_slots(kind, j):
    if kind == "threshold":
        return [f"tau1_{j}_{c}" for c in range(CATS[j] - 1)]
    return [{"loading": "lam", "intercept": "nu", "residual": "theta"}[kind] + f"1_{j}"]


def union_jacobians(fr, slots):
    """J0 of the restricted fit and J1 with `slots` (full names) made free parameters."""
    sp, ks, x = fr["_sp"], fr["_ks"], fr["_x"]
    par = full(sp, ks, x)
    sp1 = dict(sp)
    for n in slots:
        sp1[n] = "rel_" + n
    ks1 = keys(sp1)
    val = dict(zip(ks, x))
    x1 = np.array([val[k] if k in val else par[k[4:]] for k in ks1])
    return jacobian(sp, ks, x), jacobian(sp1, ks1, x1)


def adjust(naive, P0, P1, df):
    UdV = (P1 - P0) @ Vfull
    t1, t2 = float(np.trace(UdV)), float(np.sum(UdV * UdV.T))
    a = np.sqrt(df / t2)
    b = df - a * t1
    stat = max(a * max(naive, 0.0) + b, 0.0)
    return {"naive": float(max(naive, 0.0)), "df": int(df), "trace": t1, "trace_squared": t2, "statistic": float(stat), "p": float(chi2.sf(stat, df))}


levels = [fit(0), fit(1), fit(2), fit(3), fit(4), fit(3, released=[("intercept", 2), ("loading", 4)]), fit(2, released=[("threshold", 0)])]

RELEASES = {1: [("threshold", j) for j in range(P)], 2: [("loading", j) for j in range(P)], 3: [("intercept", j) for j in range(P)], 4: [("residual", j) for j in range(P)]}


def constrained_slots(level, released=()):
    """Full names constrained at `level` but not at level - 1 (by the definition above)."""
    sp_r, sp_g = spec(level, released), spec(level - 1, released)
    out = []
    for n in ALL:
        if sp_r[n] != sp_g[n] and n.startswith(("tau1", "lam1", "nu1", "theta1")):
            out.append(n)
    return out


differences = []
for lvl in range(1, 5):
    r, g = levels[lvl], levels[lvl - 1]
    slots = constrained_slots(lvl)
    J0, J1 = union_jacobians(r, slots)
    P0, r0 = proj(J0, W)
    P1, r1 = proj(J1, W)
    d = adjust(r["discrepancy"] - g["discrepancy"], P0, P1, r1 - r0)
    d["restricted"], d["general"] = lvl, lvl - 1
    differences.append(d)

scores = []
for lvl, kind in [(2, "loading"), (3, "intercept")]:
    fr = levels[lvl]
    e = fr["_e"]
    for j in range(P):
        J0, J1 = union_jacobians(fr, released_slots(kind, j))
        P0, r0 = proj(J0, W)
        P1, r1 = proj(J1, W)
        q = float(e @ (P1 - P0) @ e)
        d = adjust(q, P0, P1, r1 - r0)
        d["level"], d["kind"], d["item"] = lvl, kind, j
        scores.append(d)

out = {
    "generator": "generate.py",
    "versions": {"python": sys.version.split()[0], "numpy": np.__version__, "scipy": scipy.__version__},
    "categories": CATS,
    "construct": CONSTRUCT,
    "groups": groups,
    "levels": [{k: v for k, v in lv.items() if not k.startswith("_")} for lv in levels],
    "differences": differences,
    "scores": scores,
}
json.dump(out, sys.stdout, indent=1)
