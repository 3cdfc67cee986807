"""numpy peer for the sampling-covariance sandwich of issue 15 (bench/bench.sh section 6).

Reads the contribution matrix C (n x k, each respondent's contribution to each of the k
polychoric correlations) and the weights A (k x 200) that `cargo bench -p construe-stats --
acov-export DIR` writes, then does what a program holding the full sampling covariance does:
V = C'C (k x k) and A' V A. Only those two products are timed (reading the files is not), so the
peer is spared computing the correlations and the contributions that construe's figure includes.
Usage: python3 bench/acov_peer.py DIR
"""

import resource
import sys
import time

import numpy as np

d = sys.argv[1]
c = np.load(f"{d}/c.npy")
a = np.load(f"{d}/a.npy")
t0 = time.perf_counter()
v = c.T @ c
t1 = time.perf_counter()
s = a.T @ v @ a
t2 = time.perf_counter()
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(
    f"numpy peer, n = {c.shape[0]}, k = {c.shape[1]}: V = C'C {t1 - t0:.3f} s, A'VA {t2 - t1:.3f} s, "
    f"total {t2 - t0:.3f} s; peak RSS {peak:.0f} MB; S[0,0] = {s[0, 0]:.12e}, trace S = {np.trace(s):.12e}"
)
