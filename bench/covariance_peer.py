"""numpy.cov peer for the covariance benchmark: read the item columns of a Parquet file with
pyarrow (timed alone), then numpy.cov on the rows x items matrix (timed alone, median of
--repeat runs), then numpy.linalg.eigvalsh of the correlations (construe's step also checks
definiteness). Run it under /usr/bin/time -v for its peak memory.
Usage: python3 bench/covariance_peer.py data.parquet --prefix x --repeat 5
"""

import argparse
import time

import numpy as np
import pyarrow.parquet as pq


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("path")
    ap.add_argument("--prefix", default="x", help="item columns start with this")
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    t = time.perf_counter()
    table = pq.read_table(args.path)
    names = [n for n in table.column_names if n.startswith(args.prefix)]
    data = np.column_stack([table.column(n).to_numpy() for n in names])
    del table
    read = time.perf_counter() - t
    times = []
    for _ in range(args.repeat):
        t = time.perf_counter()
        cov = np.cov(data, rowvar=False)
        times.append(time.perf_counter() - t)
    times.sort()
    # construe's covariance step also checks definiteness (smallest eigenvalue of the
    # correlation matrix); time numpy's LAPACK eigenvalues of the same matrix for that part.
    sd = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sd, sd)
    eig_times = []
    for _ in range(args.repeat):
        t = time.perf_counter()
        smallest = np.linalg.eigvalsh(corr)[0]
        eig_times.append(time.perf_counter() - t)
    eig_times.sort()
    print(f"numpy read seconds: {read:.3f}")
    print(f"numpy.cov seconds (median of {args.repeat}): {times[len(times) // 2]:.4f}")
    print(f"numpy.linalg.eigvalsh of the correlations (median of {args.repeat}): "
          f"{eig_times[len(eig_times) // 2]:.4f}, smallest {smallest:.6g}")
    print(f"shape: {data.shape}, cov[0,1] = {cov[0, 1]:.12g}")


if __name__ == "__main__":
    main()
