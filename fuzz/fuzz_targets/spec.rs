//! Spec text -> parse, semantic validation against the demo's real columns, and rendering of
//! every diagnostic (caret lines index into the source, a classic place for a panic).
#![no_main]

use std::path::{Path, PathBuf};
use std::sync::OnceLock;

use construe::app::check::source_columns;
use construe::spec::SpecFile;
use construe::spec::validate::{SourceColumns, validate};
use libfuzzer_sys::fuzz_target;

fn demo_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../pipelines/transit")
}

/// The demo's data-file headers, read once: validation then checks fuzzed item names against
/// real columns without reading a file per input.
fn demo_sources() -> &'static [SourceColumns] {
    static SOURCES: OnceLock<Vec<SourceColumns>> = OnceLock::new();
    SOURCES.get_or_init(|| SpecFile::read(&demo_dir().join("spec.yaml")).map(|s| source_columns(&s)).unwrap_or_default())
}

fuzz_target!(|bytes: &[u8]| {
    let text = String::from_utf8_lossy(bytes).into_owned();
    let path = demo_dir().join("fuzzed.yaml");
    match SpecFile::parse(&path, text) {
        Ok(file) => {
            let mut findings = file.early.clone();
            findings.extend(validate(&file.spec, demo_sources()));
            let _ = file.diagnose(findings).to_string();
        }
        Err(report) => {
            assert!(report.has_errors(), "a refused spec must carry an error");
            let _ = report.to_string();
        }
    }
});
