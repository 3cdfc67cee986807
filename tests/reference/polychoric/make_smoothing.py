"""Reference nearest correlation matrices for crates/construe-stats/src/smoothing.rs.

Independent of the alternating-projection method under test: every correlation matrix is
X = L L^T with unit-length rows of L, so minimise ||X - A||_F^2 over L with scipy's BFGS
(analytic gradient) from several random starts and keep the best. Run from this directory:
    python3 make_smoothing.py        # writes smoothing.json
"""

import json
import platform

import numpy as np
import scipy
from scipy.optimize import minimize


def nearest_correlation(a, starts=20, seed=1):
    n = a.shape[0]
    rng = np.random.default_rng(seed)

    def unpack(v):
        m = v.reshape(n, n)
        norms = np.linalg.norm(m, axis=1, keepdims=True)
        return m, norms, m / norms

    def objective(v):
        m, norms, l = unpack(v)
        x = l @ l.T
        d = x - a
        f = np.sum(d * d)
        gl = 4.0 * d @ l  # d f / d L
        # chain rule through row normalisation: dL/dm = (I - l l^T) / |m| per row
        gm = (gl - np.sum(gl * l, axis=1, keepdims=True) * l) / norms
        return f, gm.ravel()

    best = None
    for s in range(starts):
        v0 = np.linalg.cholesky(np.eye(n)).ravel() if s == 0 else rng.standard_normal(n * n)
        res = minimize(objective, v0, jac=True, method="BFGS",
                       options={"gtol": 1e-13, "maxiter": 20000})
        if best is None or res.fun < best.fun:
            best = res
    _, _, l = unpack(best.x)
    return l @ l.T, best.fun


cases = {
    "Higham 2002 3x3 example": [[1, 1, 0], [1, 1, 1], [0, 1, 1]],
    "4x4 pairwise-deletion style": [
        [1.0, 0.9, 0.7, 0.1],
        [0.9, 1.0, 0.3, 0.6],
        [0.7, 0.3, 1.0, 0.8],
        [0.1, 0.6, 0.8, 1.0],
    ],
    "5x5 mixed polychoric style": [
        [1.0, 0.95, 0.9, -0.2, 0.4],
        [0.95, 1.0, 0.6, 0.5, 0.1],
        [0.9, 0.6, 1.0, -0.6, 0.7],
        [-0.2, 0.5, -0.6, 1.0, 0.3],
        [0.4, 0.1, 0.7, 0.3, 1.0],
    ],
}

out = []
for name, rows in cases.items():
    a = np.array(rows, dtype=float)
    x, f = nearest_correlation(a)
    out.append({
        "name": name,
        "input": a.tolist(),
        "min_eigenvalue": float(np.linalg.eigvalsh(a).min()),
        "nearest": x.tolist(),
        "squared_frobenius_distance": f,
        "nearest_min_eigenvalue": float(np.linalg.eigvalsh(x).min()),
    })

with open("smoothing.json", "w") as fh:
    json.dump({
        "versions": {"python": platform.python_version(), "numpy": np.__version__,
                     "scipy": scipy.__version__},
        "method": "BFGS on unit-row factors X = L L^T, 20 starts, gtol 1e-13",
        "cases": out,
    }, fh, indent=1)
