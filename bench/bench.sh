#!/usr/bin/env bash
# construe benchmarks against peers measured in the same run (ratios are what count on a shared
# machine). Needs numpy and scipy (pip install numpy scipy pyarrow). Usage: bash bench/bench.sh
# Figures and the machine they were measured on are recorded in bench/README.md.
set -euo pipefail
cd "$(dirname "$0")/.."
target="${CARGO_TARGET_DIR:-target}"
cargo build --release --quiet
bin="$target/release/construe"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT

median() { sort -n | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
seconds() {
  python3 -c 'import subprocess, sys, time
t = time.perf_counter(); subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
print(f"{time.perf_counter() - t:.4f}")' "$@"
}

echo "== 1. fully cached rerun of the demo (median of 7)"
cp -r pipelines/transit "$work/transit"
sed -i 's#dir: ../../reports#dir: reports#' "$work/transit/spec.yaml"
"$bin" run "$work/transit/spec.yaml" --cache "$work/cache" >/dev/null 2>&1
for _ in 1 2 3 4 5 6 7; do seconds "$bin" run "$work/transit/spec.yaml" --cache "$work/cache"; done | median

echo "== 2. polychoric matrix, 100 five-point items x 10,000 rows: construe vs the scipy two-step reference"
python3 bench/polychoric_reference.py --make-csv "$work/items.csv" --items 100 --n 10000 --seed 11
items=$(head -1 "$work/items.csv" | tr ',' ' ')
{
  echo "construe: 1"; echo "title: polychoric bench"
  echo "data: {waves: [{id: w, file: items.csv}]}"
  echo "constructs:"; echo "  pool: {items: [$(echo $items | tr ' ' ',')]}"
  echo "analyses: {covariance: {}}"
} > "$work/poly.yaml"
for _ in 1 2 3 4 5; do seconds "$bin" run "$work/poly.yaml" --no-cache; done | median | sed 's/^/construe run (load + covariance) seconds: /'
python3 bench/polychoric_reference.py "$work/items.csv" --out "$work/ref.json" | tail -n 3

echo "== 3. covariance of ROWS x 100 continuous items from Parquet: construe vs numpy.cov"
rows="${BENCH_ROWS:-1000000}"
python3 - "$work" <<'PY'
import sys
work = sys.argv[1]
with open(f"{work}/wide.yaml", "w") as f:
    f.write("simulate: 1\ntitle: wide bench\nn: 1000\nseed: 5\nmissing: 0\nconstructs:\n")
    for c in range(10):
        f.write(f"  - {{name: f{c}, variance: 1}}\n")
    f.write("items:\n")
    for c in range(10):
        for i in range(10):
            f.write(f"  - {{name: x{c}_{i}, construct: f{c}, loading: 0.7, error_variance: 0.51, mean: 3}}\n")
with open(f"{work}/wide-spec.yaml", "w") as f:
    f.write("construe: 1\ntitle: wide bench\ndata: {waves: [{id: w, file: wide.parquet}]}\nconstructs:\n")
    for c in range(10):
        items = ", ".join(f"x{c}_{i}" for i in range(10))
        f.write(f"  f{c}: {{items: [{items}]}}\n")
    f.write("analyses: {covariance: {}}\n")
PY
"$bin" simulate "$work/wide.yaml" --n "$rows" --out "$work/wide.parquet"
ls -l "$work/wide.parquet"
for _ in 1 2 3 4 5; do
  "$bin" run "$work/wide-spec.yaml" --no-cache 2>&1 | grep -E "^ *(load|covariance)" || true
done
/usr/bin/time -v "$bin" run "$work/wide-spec.yaml" --no-cache 2>&1 | grep -E "Maximum resident|Elapsed" || true
/usr/bin/time -v python3 bench/covariance_peer.py "$work/wide.parquet" --prefix x 2>&1 |
  grep -E "numpy|shape|Maximum resident|Elapsed" || true
