//! Bytes as a CSV wave -> header read and numeric column read of the demo's item names, the
//! two calls `check` and `load` make. Any outcome but a panic is fine.
#![no_main]

use construe::data::{column_names, read_numeric_columns};
use libfuzzer_sys::fuzz_target;

/// libFuzzer's panic hook aborts on every panic, even one `data::guarded` catches and turns
/// into a diagnostic (polars asserts on some damaged files). Restore the default hook: a panic
/// that escapes construe still aborts, through libfuzzer-sys's own unwind check.
fn quiet_caught_panics() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        let _ = std::panic::take_hook();
    });
}

fuzz_target!(|bytes: &[u8]| {
    quiet_caught_panics();
    static DIR: std::sync::OnceLock<tempfile::TempDir> = std::sync::OnceLock::new();
    let path = DIR.get_or_init(|| tempfile::tempdir().expect("temporary folder")).path().join("wave.csv");
    std::fs::write(&path, bytes).expect("write the input");
    let items: Vec<String> = ["cr1", "pu4", "tr3", "fare_share"].iter().map(|s| s.to_string()).collect();
    if let Ok(columns) = column_names(&path) {
        let _ = read_numeric_columns(&path, &columns);
    }
    let _ = read_numeric_columns(&path, &items);
});
