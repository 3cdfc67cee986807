#!/usr/bin/env bash
# construe benchmarks against peers measured in the same run (ratios are what count on a shared
# machine). Needs numpy, scipy and pyarrow (pip install numpy scipy pyarrow).
# Usage: bash bench/bench.sh                  every section
#        BENCH_SECTIONS="3 5" bash bench/bench.sh   some sections
#        BENCH_ROWS=100000 BENCH_RUNS=7 ...    fewer rows in section 3, more repeats
# Each construe figure is the median over BENCH_RUNS (default 5) runs of the step time the run
# log prints; peak memory is /usr/bin/time -v's maximum resident set size of one whole run.
# Figures and the machine they were measured on are recorded in bench/README.md.
set -euo pipefail
cd "$(dirname "$0")/.."
target="${CARGO_TARGET_DIR:-target}"
bin="$target/release/construe"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
sections="${BENCH_SECTIONS:-1 2 3 4 5 6}"
runs="${BENCH_RUNS:-5}"
want() { [[ " $sections " == *" $1 "* ]]; }
# Sections 1-5 run the CLI; section 6 only the numerics' bench binary.
if [[ "$sections" =~ [1-5] ]]; then cargo build --release --quiet; fi

median() { sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
seconds() {
  python3 -c 'import subprocess, sys, time
t = time.perf_counter(); subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
print(f"{time.perf_counter() - t:.4f}")' "$@"
}
# step_medians SPEC STEP...: run SPEC without the cache $runs times; print each step's median.
step_medians() {
  local spec="$1"
  shift
  for _ in $(seq "$runs"); do "$bin" run "$spec" --no-cache 2>&1; done >"$work/log"
  for step in "$@"; do
    printf '  %-11s median of %s: %ss\n' "$step" "$runs" \
      "$(grep -E "^ *$step +computed" "$work/log" | awk '{sub("s$", "", $3); print $3}' | median)"
  done
}
peak_rss() {
  /usr/bin/time -v "$@" 2>&1 >/dev/null | awk -F': ' '/Maximum resident/ {printf "  peak RSS: %.0f MB\n", $2 / 1024}'
}
# construe_cov01 SPEC: the [0][1] covariance of the newest report of SPEC, to compare with the peer.
construe_cov01() {
  python3 - "$1" <<'PY'
import glob, json, os, sys
found = glob.glob(os.path.join(os.path.dirname(sys.argv[1]), "reports", "*", "v*", "results.json"))
newest = max(found, key=os.path.getmtime)
print(f"  construe cov[0,1] = {json.load(open(newest))['covariance']['covariance'][0][1]!r}")
PY
}
# model NAME CLUSTERS PER DATA ANALYSES ROWS: simulate a chain-of-clusters data set and its spec.
model() {
  python3 bench/make_model.py --clusters "$2" --per "$3" --data "$4" --analyses "$5" \
    --model "$work/$1-model.yaml" --spec "$work/$1.yaml"
  "$bin" simulate "$work/$1-model.yaml" --n "$6" --out "$work/$4" >/dev/null
}

if want 1; then
  echo "== 1. fully cached rerun of the demo (median of 7 wall times)"
  cp -r pipelines/transit "$work/transit"
  sed -i 's#dir: ../../reports#dir: reports#' "$work/transit/spec.yaml"
  "$bin" run "$work/transit/spec.yaml" --cache "$work/cache" >/dev/null 2>&1
  for _ in 1 2 3 4 5 6 7; do seconds "$bin" run "$work/transit/spec.yaml" --cache "$work/cache"; done | median
  peak_rss "$bin" run "$work/transit/spec.yaml" --cache "$work/cache"
fi

if want 2; then
  echo "== 2. polychoric matrix, 100 five-point items x 10,000 rows: construe vs the scipy two-step reference"
  python3 bench/polychoric_reference.py --make-csv "$work/items.csv" --items 100 --n 10000 --seed 11
  items=$(head -1 "$work/items.csv")
  {
    echo "construe: 1"; echo "title: polychoric bench"
    echo "data: {waves: [{id: w, file: items.csv}]}"
    echo "constructs:"; echo "  pool: {items: [$items]}"
    echo "analyses: {covariance: {}}"
  } >"$work/poly.yaml"
  step_medians "$work/poly.yaml" load covariance
  python3 bench/polychoric_reference.py "$work/items.csv" --out "$work/ref.json" | tail -n 1
fi

if want 3; then
  rows="${BENCH_ROWS:-1000000}"
  echo "== 3. covariance of $rows rows x 100 continuous items from Parquet: construe vs numpy.cov"
  model wide 10 10 wide.parquet "{covariance: {}}" "$rows"
  ls -l "$work/wide.parquet" | awk '{printf "  parquet file: %.0f MB; raw data %.0f MB\n", $5 / 1e6, '"$rows"' * 800 / 1e6}'
  step_medians "$work/wide.yaml" load covariance
  peak_rss "$bin" run "$work/wide.yaml" --no-cache
  construe_cov01 "$work/wide.yaml"
  /usr/bin/time -v python3 bench/covariance_peer.py "$work/wide.parquet" --prefix x --repeat "$runs" 2>&1 |
    grep -E "numpy|shape|Maximum resident" | sed 's/^\s*/  peer: /'
  rm -f "$work/wide.parquet"
fi

if want 4; then
  echo "== 4. cluster discovery, clusters of 25 continuous items, n = 2,000 (and covariance vs numpy.cov)"
  for items in 50 100 200 500; do
    clusters=$((items / 25))
    echo "-- $items items, $clusters clusters"
    model "disc$items" "$clusters" 25 "disc$items.parquet" "{covariance: {}, discover: {items: all, alpha: 0.01}}" 2000
    step_medians "$work/disc$items.yaml" covariance discover
    grep -E "^ *discover +computed" "$work/log" | tail -n 1 | sed 's/^ */  last run: /'
  done
  construe_cov01 "$work/disc500.yaml"
  python3 bench/covariance_peer.py "$work/disc500.parquet" --prefix x --repeat "$runs" | sed 's/^/  peer (500 items): /'
fi

if want 5; then
  echo "== 5. CFA of 60 items on 4 factors: construe vs the scipy L-BFGS-B reference"
  cargo bench --quiet -p construe-stats -- cfa 2>&1 | grep "per fit"
  python3 bench/cfa_reference.py tests/reference/sem/cfa60x4.json --repeat "$runs" | sed 's/^/  peer: /'
  model cfa 4 15 cfa.parquet "{covariance: {}, measure: {}}" 1000
  step_medians "$work/cfa.yaml" measure
fi

if want 6; then
  echo "== 6. sampling covariance of 4,950 polychoric correlations (100 five-point items x 10,000 rows) and a sandwich with a 4,950 x 200 A: construe (V never formed) vs numpy forming V = C'C"
  cargo bench --quiet -p construe-stats --no-run 2>/dev/null
  timing="$(ls -t "$target"/release/deps/timing-* | grep -v '\.d$' | head -1)"
  for _ in $(seq "$runs"); do "$timing" acov100 | sed 's/^/  /'; done
  "$timing" acov-export "$work/acov" >/dev/null
  for _ in $(seq "$runs"); do python3 bench/acov_peer.py "$work/acov" | sed 's/^/  /'; done
  rm -rf "$work/acov"
  peak_rss "$timing" acov100
  echo "   500 five-point items x 2,000 rows (k = 124,750; V would take 124 GB):"
  "$timing" acov500 | sed 's/^/  /'
  peak_rss "$timing" acov500
fi
