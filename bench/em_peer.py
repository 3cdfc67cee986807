"""Peer for issue 17's EM timing: a straightforward numpy EM (row by row E step, Little & Rubin
2002 section 11.2.1) on data of the shape `cargo bench -p construe-stats -- em` uses
(100,000 rows x 50 items, one factor with loadings 0.7, items 2..50 missing with probability
0.5 where item 1 is above its mean and 0.1 elsewhere). Times ITER iterations (default 2) and
prints the time per iteration; multiply by the iteration count plain EM needs (33 at the
construe tolerance) for a whole run.
Run: python3 bench/em_peer.py [ITER]
"""
import sys
import time

import numpy as np

n, p = 100_000, 50
iters = int(sys.argv[1]) if len(sys.argv) > 1 else 2
rng = np.random.default_rng(17)
sigma = np.full((p, p), 0.49) + np.eye(p) * 0.51
y = rng.multivariate_normal(np.zeros(p), sigma, size=n)
rate = np.where(y[:, 0] > 0, 0.5, 0.1)
mask = rng.random((n, p - 1)) < rate[:, None]
y[:, 1:][mask] = np.nan

m = np.nanmean(y, axis=0)
s = np.diag(np.nanvar(y, axis=0))
t0 = time.perf_counter()
for _ in range(iters):
    t1 = np.zeros(p)
    t2 = np.zeros((p, p))
    for row in y:
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
    m = t1 / n
    s = t2 / n - np.outer(m, m)
per = (time.perf_counter() - t0) / iters
print(f"numpy EM peer {n} x {p}: {per:.2f} s per iteration; x 33 iterations = {33 * per:.0f} s")
