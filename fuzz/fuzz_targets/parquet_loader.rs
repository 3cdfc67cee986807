//! Fuzzed bytes as a Parquet wave, through the loader (see `loader.rs`).
#![no_main]

mod loader;

use libfuzzer_sys::fuzz_target;

fuzz_target!(|bytes: &[u8]| loader::exercise(bytes, "wave.parquet"));
