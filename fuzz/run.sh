#!/usr/bin/env bash
# Fuzz every target for SECONDS each (default 300), seeding each corpus from the demo's files.
# Needs the nightly toolchain and cargo-fuzz (`cargo install cargo-fuzz`). Prints libFuzzer's
# final execution count per target; a crash leaves its input under fuzz/artifacts/<target>/.
# polars asserts on some damaged Parquet files; `data::guarded` turns those panics into
# diagnostics, but the default hook still prints them to the full log, /tmp/fuzz-<target>.log.
set -euo pipefail
cd "$(dirname "$0")"
seconds="${1:-300}"
demo=../pipelines/transit
cp ../Cargo.lock Cargo.lock  # same dependency versions as the tool itself
# Keep the (slow, instrumented) build outside the clone when CARGO_TARGET_DIR says where.
target_dir=()
if [ -n "${CARGO_TARGET_DIR:-}" ]; then target_dir=(--target-dir "$CARGO_TARGET_DIR"); fi
mkdir -p corpus/spec corpus/csv_loader corpus/parquet_loader
cp "$demo/spec.yaml" corpus/spec/demo-spec.yaml
cp "$demo/model.yaml" corpus/spec/demo-model.yaml
cp "$demo"/data/*.csv corpus/csv_loader/
cp "$demo"/data/*.parquet corpus/parquet_loader/
cargo +nightly fuzz build --sanitizer none "${target_dir[@]}"
for target in spec csv_loader parquet_loader; do
  echo "== $target ($seconds s)"
  cargo +nightly fuzz run --sanitizer none "${target_dir[@]}" "$target" "corpus/$target" -- \
    -max_total_time="$seconds" -print_final_stats=1 -max_len=65536 2>&1 | tee "/tmp/fuzz-$target.log" |
    grep -E "^stat::number_of_executed_units|^Done [0-9]+ runs|deadly signal|ERROR: libFuzzer|SUMMARY" || true
done
