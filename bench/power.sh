#!/usr/bin/env bash
# Design-study timings (issue 21): the demo model and spec at n = 300, 600, 1000 without
# resampling, one process versus four shards plus the merge, and the split of computed
# replicates' time between drawing/loading and the analyses (the `-v` line).
# Usage: bash bench/power.sh [construe binary] [replicates per size, default 500]
set -euo pipefail
cd "$(dirname "$0")/.."
bin="${1:-${CARGO_TARGET_DIR:-target}/release/construe}"
reps="${2:-500}"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
study=(pipelines/transit/model.yaml pipelines/transit/spec.yaml --n 300,600,1000 --replicates "$reps" --seed 1)
cpu() { /usr/bin/time -f "%e s wall, %U s user + %S s system" "$@"; }
echo "== one process, $reps replicates x 3 sizes"
cpu "$bin" -v power "${study[@]}" --out "$work/one" --cache "$work/c1" 2>&1 | grep -E "computed replicates|wrote study| s wall" | sed 's/.*INFO construe::cli: //'
echo "== four shards one after another, then the merge"
for k in 1 2 3 4; do
  cpu "$bin" power "${study[@]}" --out "$work/four" --cache "$work/c4" --shard "$k/4" 2>&1 | grep -E "shard| s wall"
done
cpu "$bin" power "${study[@]}" --out "$work/four" --cache "$work/c4" 2>&1 | grep -E "wrote study| s wall"
cmp "$work/one/v1/results.json" "$work/four/v1/results.json" && echo "results.json identical"
