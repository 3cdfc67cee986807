//! What both loader targets do: write the fuzzed bytes as a wave file with the given name, then
//! make the header read and numeric column reads that `check` and `load` make. Any outcome but
//! a panic is fine.

use construe::data::{column_names, read_numeric_columns};

/// libFuzzer's panic hook aborts on every panic, even one `data::guarded` catches and turns
/// into a diagnostic (polars asserts on some damaged files). Restore the default hook: a panic
/// that escapes construe still aborts, through libfuzzer-sys's own unwind check.
fn quiet_caught_panics() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        let _ = std::panic::take_hook();
    });
}

pub fn exercise(bytes: &[u8], file_name: &str) {
    quiet_caught_panics();
    static DIR: std::sync::OnceLock<tempfile::TempDir> = std::sync::OnceLock::new();
    let path = DIR.get_or_init(|| tempfile::tempdir().expect("temporary folder")).path().join(file_name);
    std::fs::write(&path, bytes).expect("write the input");
    let items: Vec<String> = ["cr1", "pu4", "tr3", "fare_share"].iter().map(|s| s.to_string()).collect();
    if let Ok(columns) = column_names(&path) {
        let _ = read_numeric_columns(&path, &columns);
    }
    let _ = read_numeric_columns(&path, &items);
}
