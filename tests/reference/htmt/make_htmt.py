"""Reference values of the heterotrait-monotrait ratio (Henseler, Ringle & Sarstedt 2015,
eq. 6) and of the Fornell & Larcker (1981) comparison, computed with numpy from item
correlation matrices drawn here. Run: python3 tests/reference/htmt/make_htmt.py"""
import json

import numpy as np
import scipy

rng = np.random.default_rng(20151)


def htmt(r, groups):
    k = len(groups)
    out = np.full((k, k), np.nan)
    for i in range(k):
        for j in range(k):
            if i == j:
                continue
            a, b = groups[i], groups[j]
            hetero = np.mean([r[x, y] for x in a for y in b])
            mono_a = np.mean([r[x, y] for x in a for y in a if x < y])
            mono_b = np.mean([r[x, y] for x in b for y in b if x < y])
            out[i, j] = hetero / np.sqrt(mono_a * mono_b)
    return out


cases = []
for name, groups, phi in [
    ("distinct", [[0, 1, 2], [3, 4, 5, 6], [7, 8]], [[1, 0.4, 0.2], [0.4, 1, 0.3], [0.2, 0.3, 1]]),
    ("overlapping", [[0, 1, 2], [3, 4, 5]], [[1, 0.95], [0.95, 1]]),
]:
    p = sum(len(g) for g in groups)
    lam = np.zeros((p, len(groups)))
    for k, g in enumerate(groups):
        for i in g:
            lam[i, k] = rng.uniform(0.55, 0.85)
    sigma = lam @ np.array(phi) @ lam.T
    np.fill_diagonal(sigma, 1.0)
    x = rng.multivariate_normal(np.zeros(p), sigma, size=300)
    r = np.corrcoef(x, rowvar=False)
    h = htmt(r, groups)
    cases.append({
        "name": name,
        "groups": groups,
        "r": r.tolist(),
        "htmt": [[None if np.isnan(v) else float(v) for v in row] for row in h],
    })

json.dump({"generator": "make_htmt.py", "numpy": np.__version__, "scipy": scipy.__version__, "cases": cases},
          open(__file__.replace("make_htmt.py", "htmt.json"), "w"), indent=1)
