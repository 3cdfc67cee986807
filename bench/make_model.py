"""Write a benchmark simulation model and the spec that analyses its data.

The model has CLUSTERS constructs in a chain (f0 -> f1 -> ..., coefficient 0.4, every construct
standardized), each measured by PER continuous items with loadings spread evenly over
0.6-0.8 and error variances 1 - loading^2, so every item has variance 1. `construe simulate
MODEL --n N --out DATA` then draws the data; the spec reads DATA (CSV or Parquet by extension)
and runs the analyses given by --analyses, a YAML flow mapping.

Usage: python3 bench/make_model.py --clusters 8 --per 25 --data items.parquet \
           --model model.yaml --spec spec.yaml --analyses "{covariance: {}, discover: {items: all}}"
"""

import argparse


def item_names(clusters, per):
    return [[f"x{c}_{i}" for i in range(per)] for c in range(clusters)]


def write_model(path, clusters, per, seed):
    names = item_names(clusters, per)
    with open(path, "w") as f:
        f.write(f"simulate: 1\ntitle: benchmark model\nn: 1000\nseed: {seed}\nmissing: 0\n")
        f.write("constructs:\n")
        for c in range(clusters):
            f.write(f"  - {{name: f{c}, total_variance: 1}}\n")
        if clusters > 1:
            f.write("paths:\n")
            for c in range(1, clusters):
                f.write(f"  - {{from: f{c - 1}, to: f{c}, coefficient: 0.4}}\n")
        f.write("items:\n")
        for c, group in enumerate(names):
            for i, name in enumerate(group):
                loading = 0.6 + 0.2 * i / max(per - 1, 1)
                error = 1.0 - loading * loading
                f.write(
                    f"  - {{name: {name}, construct: f{c}, loading: {loading:.4f}, "
                    f"error_variance: {error:.6f}, mean: 3}}\n"
                )


def write_spec(path, clusters, per, data, analyses):
    with open(path, "w") as f:
        f.write(f"construe: 1\ntitle: benchmark {clusters}x{per}\n")
        f.write(f"data: {{waves: [{{id: w, file: {data}}}]}}\nconstructs:\n")
        for c, group in enumerate(item_names(clusters, per)):
            f.write(f"  f{c}: {{items: [{', '.join(group)}]}}\n")
        f.write(f"analyses: {analyses}\n")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--clusters", type=int, required=True)
    ap.add_argument("--per", type=int, required=True)
    ap.add_argument("--data", required=True, help="data file name, relative to the spec")
    ap.add_argument("--model", required=True)
    ap.add_argument("--spec", required=True)
    ap.add_argument("--analyses", default="{covariance: {}}")
    ap.add_argument("--seed", type=int, default=5)
    args = ap.parse_args()
    write_model(args.model, args.clusters, args.per, args.seed)
    write_spec(args.spec, args.clusters, args.per, args.data, args.analyses)


if __name__ == "__main__":
    main()
