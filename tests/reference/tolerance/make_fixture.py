"""Reference values for the close-fit tetrad tests (construe issue 16).

close_fit: the p-value of H0 |tau| <= tol for a sample tetrad t ~ N(tau, se^2), computed as
the supremum over a fine grid of tau in [-tol, tol] of P(|T| >= |t|) (scipy.stats.norm), not
from the closed form the Rust code uses (Browne & Cudeck 1993's close-fit idea, one tetrad).

hexagon: the squared Mahalanobis distance min (x - t)' W (x - t) over the hexagon
{|x1| <= tol, |x2| <= tol, |x2 - x1| <= tol}, by scipy.optimize.minimize (SLSQP) with the six
linear constraints, from several starts.

Run: python3 tests/reference/tolerance/make_fixture.py > tests/reference/tolerance/tolerance.json
"""
import json

import numpy as np
import scipy
from scipy.optimize import minimize
from scipy.stats import norm


def close_fit(t, se, tol):
    taus = np.linspace(-tol, tol, 20001) if tol > 0 else np.array([0.0])
    a = abs(t)
    probs = norm.sf((a - taus) / se) + norm.cdf((-a - taus) / se)
    return float(probs.max())


def hexagon(t, w, tol):
    t = np.asarray(t)
    w = np.asarray(w)
    f = lambda x: float((x - t) @ w @ (x - t))
    cons = []
    for sign in (1, -1):
        cons.append({"type": "ineq", "fun": lambda x, s=sign: tol - s * x[0]})
        cons.append({"type": "ineq", "fun": lambda x, s=sign: tol - s * x[1]})
        cons.append({"type": "ineq", "fun": lambda x, s=sign: tol - s * (x[1] - x[0])})
    best = np.inf
    for start in ([0.0, 0.0], [tol, tol], [-tol, -tol], [tol, 0.0], [0.0, -tol]):
        r = minimize(f, np.array(start), constraints=cons, method="SLSQP", options={"ftol": 1e-14, "maxiter": 500})
        best = min(best, r.fun)
    return float(best)


cases = []
for t, se, tol in [(0.0, 0.01, 0.05), (0.03, 0.01, 0.05), (0.07, 0.01, 0.05), (-0.12, 0.02, 0.05),
                   (0.09, 0.03, 0.05), (0.2, 0.05, 0.1), (0.04, 0.02, 0.0), (-0.01, 0.004, 0.02)]:
    cases.append({"diff": t, "se": se, "tol": tol, "p": close_fit(t, se, tol)})

rng = np.random.default_rng(16)
hex_cases = []
for _ in range(12):
    tol = float(rng.choice([0.02, 0.05, 0.1]))
    t = rng.normal(0, 0.1, size=2).tolist()
    a = rng.normal(size=(2, 2))
    omega = a @ a.T * 1e-3 + np.eye(2) * 2e-4
    w = np.linalg.inv(omega)
    hex_cases.append({"t": t, "w": w.tolist(), "tol": tol, "distance": hexagon(t, w, tol)})

print(json.dumps({
    "generator": "tests/reference/tolerance/make_fixture.py",
    "numpy": np.__version__,
    "scipy": scipy.__version__,
    "close_fit": cases,
    "hexagon": hex_cases,
}, indent=1))
